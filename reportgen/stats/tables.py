"""Item × category count tables and their compression into distinct patterns.

Every count-table coefficient (Fleiss' kappa, Krippendorff's alpha, Gwet's AC1/AC2,
Brennan–Prediger) depends on the ratings only through the items × categories table of counts
``n_ij``, and is a function of column sums of per-item features.  Items with the same row of
counts have the same features, so a study of 100,000 items usually has only a few thousand
distinct rows ("patterns").  Coefficients, standard errors and the bootstrap all work on the
patterns weighted by their multiplicities, which is exact and much cheaper than working per item.

Validated against: a per-item Python loop and ``np.unique(axis=0)`` in ``tests/stats/test_tables.py``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache

import numpy as np

__all__ = ["CountPatterns", "as_patterns", "compress", "count_patterns", "count_table", "patterns"]

_SMALL_TABLE = 512  # tables with at most this many items are not compressed
_DENSE_KEYS_LIMIT = 1 << 24  # largest key space handled by a direct bincount
_UNSIGNED = {
    1: np.dtype(np.uint8),
    2: np.dtype(np.uint16),
    4: np.dtype(np.uint32),
    8: np.dtype(np.uint64),
}


def count_table(codes: np.ndarray, n_categories: int) -> np.ndarray:
    """Items × categories table of counts from coded ratings, in one ``np.bincount`` pass.

    ``codes`` has shape ``(n_items, ...)`` (for example items × raters × trials); each entry is a
    category index ``0 .. n_categories-1`` or ``-1`` for a missing rating.  Missing ratings are
    never counted as a category.  Returns an ``(n_items, n_categories)`` int64 array.

    Validated against: a per-item loop with ``np.bincount`` in ``tests/stats/test_tables.py``.
    """
    k = int(n_categories)
    if k < 1:
        raise ValueError("n_categories must be at least 1")
    a = np.asarray(codes)
    if a.ndim < 1:
        raise ValueError("codes must have at least one dimension (items first)")
    if a.dtype.kind not in "iu":
        raise TypeError(f"codes must be an integer array, got dtype {a.dtype}")
    n = a.shape[0]
    if a.size == 0:
        return np.zeros((n, k), dtype=np.int64)
    a = a.reshape(n, -1)
    lo, hi = int(a.min()), int(a.max())
    if lo < -1 or hi >= k:
        raise ValueError(
            f"codes must lie in -1 .. {k - 1} (-1 = missing); found values from {lo} to {hi}"
        )
    # Each item owns k + 1 bins; bin 0 of an item collects its missing ratings (code -1), so no
    # mask is needed.  int8 + intp broadcasts straight to intp, which bincount takes without a copy.
    offsets = np.arange(1, n * (k + 1), k + 1, dtype=np.intp)[:, None]
    flat = np.bincount((a + offsets).ravel(), minlength=n * (k + 1))
    return flat.reshape(n, k + 1)[:, 1:].astype(np.int64, copy=True)


@dataclass(frozen=True)
class CountPatterns:
    """Distinct rows of a table with how often each occurs.

    ``rows[inverse]`` rebuilds the original table; ``multiplicity.sum()`` is its number of rows.
    """

    rows: np.ndarray
    multiplicity: np.ndarray
    inverse: np.ndarray = field(repr=False)

    @property
    def n_items(self) -> int:
        return int(self.multiplicity.sum())

    @property
    def n_patterns(self) -> int:
        return int(self.multiplicity.shape[0])


def patterns(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Distinct rows of a 2-D array: ``(unique_rows, multiplicity, inverse)``.

    ``unique_rows[inverse]`` equals ``rows`` exactly.  Small non-negative integer rows are keyed
    by a mixed-radix code (exact; a direct ``bincount`` when the key space is small); other rows
    are keyed by a 64-bit hash of their bytes, and the grouping is verified row by row, falling
    back to ``np.unique(axis=0)`` if two different rows ever shared a hash.  The order of the
    patterns is an implementation detail.

    Validated against: ``np.unique(rows, axis=0)`` in ``tests/stats/test_tables.py``.
    """
    x = np.asarray(rows)
    if x.ndim != 2:
        raise ValueError(f"rows must be 2-D, got shape {x.shape}")
    n = x.shape[0]
    if n == 0:
        return x.copy(), np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.intp)
    if x.shape[1] == 0:
        return x[:1].copy(), np.array([n], dtype=np.int64), np.zeros(n, dtype=np.intp)
    key = _integer_key(x)
    if key is not None:
        keyspace = int(key[1])
        return _group_by_key(x, key[0], keyspace)
    h = _hash_rows(x)
    uniq, first, inverse, counts = np.unique(
        h, return_index=True, return_inverse=True, return_counts=True
    )
    del uniq
    u = x[first]
    if np.array_equal(u[inverse], x, equal_nan=x.dtype.kind == "f"):
        return u, counts.astype(np.int64), inverse.astype(np.intp)
    u, inverse, counts = np.unique(x, axis=0, return_inverse=True, return_counts=True)
    return u, counts.astype(np.int64), inverse.reshape(-1).astype(np.intp)


def compress(counts: np.ndarray) -> CountPatterns:
    """Compress an items × categories count table into :class:`CountPatterns`.

    Validated against: ``np.unique(axis=0)`` in ``tests/stats/test_tables.py``.
    """
    c = np.asarray(counts)
    if c.ndim != 2:
        raise ValueError(f"counts must be an items × categories table, got shape {c.shape}")
    u, mult, inv = patterns(c)
    return CountPatterns(rows=u, multiplicity=mult, inverse=inv)


def _integer_key(x: np.ndarray) -> tuple[np.ndarray, int] | None:
    """Exact mixed-radix key of non-negative integer rows, or None if it would not fit."""
    if x.dtype.kind not in "iu":
        return None
    lo = int(x.min())
    if lo < 0:
        return None
    radix = int(x.max()) + 1
    f = x.shape[1]
    if f * np.log2(max(radix, 2)) > 62:
        return None
    keyspace = radix**f
    key = x[:, 0].astype(np.int64)
    for j in range(1, f):
        key *= radix
        key += x[:, j]
    return key, keyspace


def _group_by_key(x: np.ndarray, key: np.ndarray, keyspace: int) -> tuple[np.ndarray, ...]:
    n = key.shape[0]
    if keyspace <= min(_DENSE_KEYS_LIMIT, 4 * n) or keyspace <= 4096:
        counts = np.bincount(key, minlength=keyspace)
        present = np.flatnonzero(counts)
        label = np.zeros(keyspace, dtype=np.intp)
        label[present] = np.arange(present.shape[0], dtype=np.intp)
        inverse = label[key]
        first = np.empty(present.shape[0], dtype=np.intp)
        first[inverse[::-1]] = np.arange(n - 1, -1, -1, dtype=np.intp)
        return x[first], counts[present].astype(np.int64), inverse
    _, first, inverse, counts = np.unique(
        key, return_index=True, return_inverse=True, return_counts=True
    )
    return x[first], counts.astype(np.int64), inverse.astype(np.intp)


def _hash_rows(x: np.ndarray) -> np.ndarray:
    """A 64-bit hash per row (multiply-xorshift over the row's 64-bit words)."""
    if x.dtype.kind == "f":
        x = x.astype(np.float64, copy=False) + 0.0  # -0.0 -> +0.0
    x = np.ascontiguousarray(x)
    width = x.dtype.itemsize * x.shape[1]
    pad = (-width) % 8
    b = x.view(np.uint8).reshape(x.shape[0], width)
    if pad:
        b = np.concatenate([b, np.zeros((x.shape[0], pad), dtype=np.uint8)], axis=1)
    words = np.ascontiguousarray(b).view(np.uint64)
    h = np.full(x.shape[0], 0x9E3779B97F4A7C15, dtype=np.uint64)
    mult = np.uint64(0xBF58476D1CE4E5B9)
    with np.errstate(over="ignore"):
        for j in range(words.shape[1]):
            h ^= words[:, j]
            h *= mult
            h ^= h >> np.uint64(31)
    return h


def count_patterns(codes: np.ndarray, n_categories: int) -> CountPatterns:
    """Distinct rows of the items × categories count table, straight from coded ratings.

    Same result as ``compress(count_table(codes, n_categories))`` (the order of the patterns
    may differ), but faster on large studies: an item's row of counts is identified by the
    exact mixed-radix key ``sum over its ratings of (s + 1) ** code`` (``s`` ratings per item at
    most), accumulated one rating slot at a time, so the full table is never built.  Falls back
    to building the table when the key would not fit in 62 bits.

    Validated against: ``compress(count_table(...))`` in ``tests/stats/test_tables.py``.
    """
    k = int(n_categories)
    if k < 1:
        raise ValueError("n_categories must be at least 1")
    a = np.asarray(codes)
    if a.ndim < 1:
        raise ValueError("codes must have at least one dimension (items first)")
    if a.dtype.kind not in "iu":
        raise TypeError(f"codes must be an integer array, got dtype {a.dtype}")
    n = a.shape[0]
    slots = math.prod(a.shape[1:])  # 1 for a 1-D array
    radix = slots + 1
    if n <= _SMALL_TABLE:
        if 0 < n and slots and a.dtype.kind == "i" and a.dtype.itemsize < 8:
            return _small_count_patterns(a.reshape(n, slots), k)
        return as_patterns(count_table(a, k))
    if slots == 0 or k * np.log2(radix) > 62:
        return compress(count_table(a, k))
    flat = a.reshape(n, slots)
    lo, hi = int(flat.min()), int(flat.max())
    if lo < -1 or hi >= k:
        raise ValueError(
            f"codes must lie in -1 .. {k - 1} (-1 = missing); found values from {lo} to {hi}"
        )
    power = np.zeros(k + 1, dtype=np.int64)
    power[1:] = radix ** np.arange(k, dtype=np.int64)
    by_slot = np.ascontiguousarray(flat.T)
    key = np.zeros(n, dtype=np.int64)
    for row in by_slot:
        key += power.take(row.astype(np.intp) + 1)
    unique_keys, mult, inverse = _group_keys(key, radix**k)
    digits = radix ** np.arange(k, dtype=np.int64)
    rows = (unique_keys[:, None] // digits[None, :]) % radix
    return CountPatterns(rows=rows.astype(np.int64), multiplicity=mult, inverse=inverse)


@lru_cache(maxsize=32)
def _small_layout(n: int, k: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read-only ``(bin offsets, multiplicity 1, identity inverse)`` for an n-item table."""
    offsets = np.arange(0, n * (k + 1), k + 1, dtype=np.intp)[:, None]
    ones = np.ones(n, dtype=np.int64)
    inverse = np.arange(n, dtype=np.intp)
    for x in (offsets, ones, inverse):
        x.flags.writeable = False
    return offsets, ones, inverse


def _small_count_patterns(flat: np.ndarray, k: int) -> CountPatterns:
    """Uncompressed :class:`CountPatterns` of a small (items × slots) signed-integer code array.

    The few numpy calls of :func:`count_table` without its separate min / max passes: the codes
    viewed as unsigned and shifted by one map -1 to 0 and every valid code to 1 .. k, while any
    other negative code wraps round to a value above k, so one ``max`` validates everything.
    """
    n = flat.shape[0]
    unsigned = _UNSIGNED[flat.dtype.itemsize]
    shifted = np.add(flat.view(unsigned), unsigned.type(1))
    top = int(shifted.max())
    if top > k:
        lo, hi = int(flat.min()), int(flat.max())
        raise ValueError(
            f"codes must lie in -1 .. {k - 1} (-1 = missing); found values from {lo} to {hi}"
        )
    offsets, ones, inverse = _small_layout(n, k)
    binned = np.bincount((shifted + offsets).ravel(), minlength=n * (k + 1))
    rows = binned.reshape(n, k + 1)[:, 1:].astype(np.int64)
    return CountPatterns(rows=rows, multiplicity=ones, inverse=inverse)


def _group_keys(key: np.ndarray, keyspace: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(unique_keys, counts, inverse)`` of non-negative int64 keys below ``keyspace``."""
    n = key.shape[0]
    if keyspace <= min(_DENSE_KEYS_LIMIT, 4 * n) or keyspace <= 4096:
        counts = np.bincount(key, minlength=keyspace)
        present = np.flatnonzero(counts)
        label = np.zeros(keyspace, dtype=np.intp)
        label[present] = np.arange(present.shape[0], dtype=np.intp)
        return present.astype(np.int64), counts[present].astype(np.int64), label[key]
    u, inverse, counts = np.unique(key, return_inverse=True, return_counts=True)
    return u, counts.astype(np.int64), inverse.astype(np.intp)


def as_patterns(counts: np.ndarray | CountPatterns) -> CountPatterns:
    """Validate an items × categories count table (or pass patterns through) and compress it.

    Counts must be non-negative integers (integer-valued floats are accepted).  Raises
    ``ValueError`` / ``TypeError`` with a plain message otherwise.  Tables of at most 512 items
    are wrapped without compression (each row its own pattern), which is faster there.

    Validated against: ``tests/stats/test_tables.py`` (round trip ``rows[inverse]``).
    """
    if isinstance(counts, CountPatterns):
        return counts
    c = np.asarray(counts)
    if c.ndim != 2:
        raise ValueError(f"counts must be an items × categories table, got shape {c.shape}")
    if c.shape[1] < 1:
        raise ValueError("counts must have at least one category column")
    if c.dtype.kind == "f":
        if not np.all(np.isfinite(c)) or not np.array_equal(c, np.round(c)):
            raise ValueError("counts must be whole numbers")
        c = c.astype(np.int64)
    elif c.dtype.kind == "b":
        c = c.astype(np.int64)
    elif c.dtype.kind not in "iu":
        raise TypeError(f"counts must be integers, got dtype {c.dtype}")
    if c.size and int(c.min()) < 0:
        raise ValueError("counts must not be negative")
    c = c.astype(np.int64, copy=False)
    if c.shape[0] <= _SMALL_TABLE:  # compressing a small table costs more than it saves
        n = c.shape[0]
        return CountPatterns(
            rows=c, multiplicity=np.ones(n, dtype=np.int64), inverse=np.arange(n, dtype=np.intp)
        )
    return compress(c)


# --- small helpers shared by the count-table coefficients (fleiss, gwet, krippendorff) -------


@lru_cache(maxsize=128)
def _ones(n: int) -> np.ndarray:
    """A read-only float64 vector of ``n`` ones (summing by a matrix product; built once)."""
    x = np.ones(n)
    x.flags.writeable = False
    return x


def _confidence_level_iv(confidence_level: float) -> float:
    level = float(confidence_level)
    if not (0.0 < level < 1.0):
        raise ValueError(
            f"confidence_level must be strictly between 0 and 1, got {confidence_level!r}"
        )
    return level


@lru_cache(maxsize=64)
def _normal_critical(confidence_level: float) -> float:
    """Two-sided standard-normal critical value (1.959964 for 0.95)."""
    from statistics import NormalDist

    return NormalDist().inv_cdf(0.5 + _confidence_level_iv(confidence_level) / 2.0)


def _two_sided_p(z: float) -> float:
    """Two-sided normal p-value 2(1 - Phi(|z|)), accurate in the far tail."""
    return math.erfc(abs(z) / math.sqrt(2.0))


def _finite_or_none(x: float) -> float | None:
    x = float(x)
    return x if np.isfinite(x) else None


def _weighted_var_of_mean(values: np.ndarray, mult: np.ndarray, centre: float, n: int) -> float:
    """Gwet's linearised variance: sum_i (v_i - centre)^2 / (n (n - 1)), over patterns."""
    if n < 2:
        return float("nan")
    return float(mult @ (values - centre) ** 2) / (n * (n - 1))
