"""Count tables and pattern compression (checked against plain per-item loops and np.unique)."""

from __future__ import annotations

import numpy as np
import pytest

from reportgen.stats import tables
from reportgen.stats.tables import as_patterns, compress, count_table, patterns


def _loop_count_table(codes: np.ndarray, k: int) -> np.ndarray:
    flat = codes.reshape(codes.shape[0], -1)
    out = np.zeros((flat.shape[0], k), dtype=np.int64)
    for i, row in enumerate(flat):
        for c in row:
            if c >= 0:
                out[i, c] += 1
    return out


@pytest.mark.parametrize("shape", [(30, 4), (25, 3, 2), (1, 6), (7, 1, 1)])
def test_count_table_matches_loop(shape: tuple[int, ...]) -> None:
    rng = np.random.default_rng(sum(shape))
    k = 4
    codes = rng.integers(-1, k, size=shape).astype(np.int8)
    got = count_table(codes, k)
    assert got.dtype == np.int64
    assert got.shape == (shape[0], k)
    np.testing.assert_array_equal(got, _loop_count_table(codes, k))


def test_count_table_missing_never_a_category_and_unused_categories_kept() -> None:
    codes = np.array([[-1, -1, 0], [2, 2, -1]], dtype=np.int8)
    np.testing.assert_array_equal(count_table(codes, 5), [[1, 0, 0, 0, 0], [0, 0, 2, 0, 0]])


def test_count_table_rejects_codes_out_of_range() -> None:
    with pytest.raises(ValueError, match=r"-1 \.\. 2"):
        count_table(np.array([[0, 3]]), 3)
    with pytest.raises(ValueError):
        count_table(np.array([[0, -2]]), 3)
    with pytest.raises(TypeError):
        count_table(np.array([[0.0, 1.0]]), 3)


def test_count_table_empty() -> None:
    assert count_table(np.zeros((0, 3), dtype=np.int8), 2).shape == (0, 2)


def _as_multiset(u: np.ndarray, mult: np.ndarray) -> dict[tuple, int]:
    out: dict[tuple, int] = {}
    for r, m in zip(u, mult, strict=True):
        out[tuple(r.tolist())] = out.get(tuple(r.tolist()), 0) + int(m)
    return out


@pytest.mark.parametrize(
    "rows",
    [
        np.random.default_rng(1).integers(0, 4, size=(500, 3)),  # small key space: bincount path
        np.random.default_rng(2).integers(0, 40, size=(300, 6)),  # large key space: unique path
        np.random.default_rng(3).integers(-3, 3, size=(200, 2)),  # negative: hashed path
        np.random.default_rng(4).integers(0, 3, size=(200, 4)) / 7.0,  # floats: hashed path
        np.random.default_rng(5).integers(0, 2**40, size=(50, 3)),  # too wide for a key: hashed
    ],
)
def test_patterns_match_numpy_unique(rows: np.ndarray) -> None:
    u, mult, inv = patterns(rows)
    np.testing.assert_array_equal(u[inv], rows)
    ref_u, ref_counts = np.unique(rows, axis=0, return_counts=True)
    assert _as_multiset(u, mult) == _as_multiset(ref_u, ref_counts)
    assert mult.sum() == rows.shape[0]


def test_patterns_fall_back_when_hashes_collide(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(tables, "_hash_rows", lambda x: np.zeros(x.shape[0], dtype=np.uint64))
    rows = np.array([[0.5, 1.0], [0.25, 1.0], [0.5, 1.0]])
    u, mult, inv = patterns(rows)
    np.testing.assert_array_equal(u[inv], rows)
    assert sorted(mult.tolist()) == [1, 2]


def test_patterns_negative_zero_equals_zero() -> None:
    u, mult, _ = patterns(np.array([[0.0, 1.0], [-0.0, 1.0]]))
    assert mult.tolist() == [2]


def test_compress_and_as_patterns() -> None:
    c = np.array([[2, 0], [0, 2], [2, 0], [1, 1]])
    p = compress(c)
    assert p.n_items == 4 and p.n_patterns == 3
    np.testing.assert_array_equal(p.rows[p.inverse], c)
    assert as_patterns(p) is p
    small = as_patterns(c.astype(float))  # small tables are wrapped, not compressed
    assert small.n_items == 4
    np.testing.assert_array_equal(small.rows[small.inverse], c)
    big = np.tile(c, (200, 1))
    assert as_patterns(big).n_patterns == 3 and as_patterns(big).n_items == 800
    with pytest.raises(ValueError, match="negative"):
        as_patterns(np.array([[1, -1]]))
    with pytest.raises(ValueError, match="whole numbers"):
        as_patterns(np.array([[1.5, 1.0]]))
    with pytest.raises(ValueError, match="table"):
        as_patterns(np.array([1, 2]))


@pytest.mark.parametrize(
    ("shape", "k", "seed"),
    [((900, 4), 3, 1), ((600, 3, 2), 5, 2), ((50, 20), 5, 3), ((10, 1), 2, 4), ((700, 70), 12, 5)],
)
def test_count_patterns_equals_compressed_count_table(
    shape: tuple[int, ...], k: int, seed: int
) -> None:
    from reportgen.stats.tables import count_patterns

    codes = np.random.default_rng(seed).integers(-1, k, size=shape).astype(np.int8)
    got = count_patterns(codes, k)
    table = count_table(codes, k)
    np.testing.assert_array_equal(got.rows[got.inverse], table)
    ref = compress(table)
    assert _as_multiset(got.rows, got.multiplicity) == _as_multiset(ref.rows, ref.multiplicity)
    with pytest.raises(ValueError, match="-1 .. "):
        count_patterns(np.full(shape, k), k)


@pytest.mark.parametrize("dtype", [np.int8, np.int16, np.int32, np.int64])
def test_small_study_patterns_and_range_check_for_every_integer_width(dtype: type) -> None:
    """Small studies take a one-reduction range check (codes seen as unsigned + 1): every
    signed width gives the per-item loop's table, and any code below -1 or at or above k is
    refused, including the most negative value of the type."""
    from reportgen.stats.tables import count_patterns

    rng = np.random.default_rng(int(np.dtype(dtype).itemsize))
    codes = rng.integers(-1, 3, size=(40, 3, 2)).astype(dtype)
    got = count_patterns(codes, 3)
    np.testing.assert_array_equal(got.rows[got.inverse], _loop_count_table(codes, 3))
    assert got.rows.dtype == np.int64 and got.n_items == 40
    for bad in (-2, 3, int(np.iinfo(dtype).min), int(np.iinfo(dtype).max)):
        wrong = codes.copy()
        wrong[5, 1, 0] = bad
        with pytest.raises(ValueError, match="-1 .. 2"):
            count_patterns(wrong, 3)
