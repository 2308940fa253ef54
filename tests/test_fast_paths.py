"""The shortcuts taken for large inputs give exactly what the plain code gives.

* ``reportgen.ratings``: a CSV with many short lines goes to the fast reader even under
  ``SMALL_BYTES``; ``_first_appearance`` renumbers pandas' sorted categories in order of first
  appearance.
* ``reportgen.verdict``: the confused-pair action without a reference sums ``v_a * v_b`` over the
  item records from one items × categories array; the item index and the borderline count are
  built in comprehensions.  Records that are not plain dicts of integers take the record-by-record
  loop, which the first tests compare against.
"""

from __future__ import annotations

import random
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import reportgen.ratings as ratings_module
import reportgen.verdict as verdict
from reportgen.ratings import read_table

CODES = ["A", "B", "C"]


def _pairs_record_by_record(items: list[Any], codes: list[str]) -> tuple[list[list[int]], int]:
    """The sums of the confused-pair action, one record at a time (the plain definition)."""
    k = len(codes)
    pair = [[0] * k for _ in range(k)]
    total = 0
    for it in items:
        c = it.get("counts") if isinstance(it, Mapping) else None
        if not isinstance(c, Mapping):
            continue
        v = [int(c.get(code, 0) or 0) for code in codes]
        m = sum(v)
        total += m * (m - 1) // 2
        for a in range(k):
            for b in range(a + 1, k):
                pair[a][b] += v[a] * v[b]
    return pair, total


def _random_items(rng: random.Random) -> list[Any]:
    odd = [None, 2.0, "3", True, 10**30, [1]]
    items: list[Any] = []
    for i in range(rng.randint(0, 8)):
        counts = {c: rng.randint(0, 6) for c in CODES if rng.random() < 0.9}
        if rng.random() < 0.05 and counts:
            counts[next(iter(counts))] = rng.choice(odd)
        it: Any = {
            "id": rng.choice([f"I{i}", "I0", i]),
            "counts": counts,
            "ratings": rng.choice([0, 1, 2, 5, None, True]),
            "all_agree": rng.choice([True, False, None]),
            "matches_reference": rng.choice([True, False, None]),
        }
        if rng.random() < 0.03:
            it = "not a record"
        elif rng.random() < 0.03:
            del it["id"]
        items.append(it)
    return items


def test_item_count_table_gives_the_record_by_record_sums() -> None:
    rng = random.Random(11)
    fast = 0
    for _ in range(2000):
        items = _random_items(rng)
        try:
            expected = _pairs_record_by_record(items, CODES)
        except (TypeError, ValueError):
            expected = None  # the loop itself refuses such a record; the table must too
        table = verdict._item_count_table(items, CODES)
        if table is None:
            continue
        fast += 1
        m = table.sum(axis=1)
        cross = table.T @ table
        got = (
            [[int(cross[a, b]) if a < b else 0 for b in range(3)] for a in range(3)],
            int((m * (m - 1) // 2).sum()),
        )
        assert got == expected
    assert fast > 500  # the array path is the common one


def test_item_count_table_refuses_what_it_cannot_sum_exactly() -> None:
    ok = [
        {"id": "I1", "counts": {"A": 2, "B": 1}},
        {"id": "I2", "counts": {"A": 1, "B": 1, "C": 2}},
    ]
    assert verdict._item_count_table(ok, CODES).tolist() == [[2, 1, 0], [1, 1, 2]]
    for bad in (
        [{"id": "I1", "counts": {"A": 2.0}}],
        [{"id": "I1", "counts": {"A": None}}],
        [{"id": "I1", "counts": {"A": 2**40}}],
        [{"id": "I1", "counts": [2, 1]}],
        [{"id": "I1"}],
        ["I1"],
        [],
    ):
        assert verdict._item_count_table(bad, CODES) is None, bad


def test_confused_pair_without_reference_same_as_the_plain_sums() -> None:
    from test_verdict import NOMINAL, make_results, make_study

    study = make_study(
        scale="nominal", categories=NOMINAL, defect_category=None, reference_path=None
    )
    rng = np.random.default_rng(5)
    counts = rng.multinomial(6, [0.5, 0.3, 0.2], size=400)
    res = make_results(study, reference=False)
    res["items"] = [
        {
            "id": f"I{i}",
            "ratings": 6,
            "counts": dict(zip(CODES, map(int, row), strict=True)),
            "all_agree": bool(row.max() == 6),
        }
        for i, row in enumerate(counts)
    ]
    pair, total = _pairs_record_by_record(res["items"], CODES)
    act = verdict._confused_pair(study, res)[0]
    n = max(pair[a][b] for a in range(3) for b in range(a + 1, 3))
    assert act["figures"]["of"] == total == 400 * 15
    assert act["figures"]["count"] == n
    # a record the array cannot hold (a float count) sends every record through the loop
    res["items"][0]["counts"] = {c: float(v) for c, v in res["items"][0]["counts"].items()}
    assert verdict._item_count_table(res["items"], CODES) is None
    assert verdict._confused_pair(study, res)[0]["figures"] == act["figures"]


def test_few_borderline_and_item_index_keep_their_definitions() -> None:
    rng = random.Random(4)
    for _ in range(1000):
        items = _random_items(rng)
        index: dict[str, Any] = {}
        for it in items:
            if isinstance(it, Mapping) and "id" in it:
                index[str(it["id"])] = it
        assert verdict._item_index({"items": items}) == index
        judged = [
            it for it in index.values() if isinstance(it.get("ratings"), int) and it["ratings"] >= 2
        ]
        got = verdict._few_borderline(None, {"items": items})  # type: ignore[arg-type]
        if len(judged) < 2:
            assert got == []
            continue
        split = sum(
            it.get("all_agree") is False or it.get("matches_reference") is False for it in judged
        )
        if split / len(judged) >= verdict.BORDERLINE_SHARE:
            assert got == []
        else:
            assert got[0]["figures"]["items_with_disagreement"] == split
            assert got[0]["figures"]["items"] == len(judged)


def test_first_appearance_renumbers_sorted_categories() -> None:
    pd = pytest.importorskip("pandas")
    rng = np.random.default_rng(2)
    for values in (
        rng.choice(["b", "a", "c", "a "], size=300).tolist(),
        [f"I{int(x):04d}" for x in rng.integers(0, 2000, size=5000)],
        ["only"] * 7,
        ["x", "y", "z"],
    ):
        cat = pd.Series(values, dtype="category").cat
        codes, texts = ratings_module._first_appearance(cat)
        first = list(dict.fromkeys(values))
        assert texts == first
        assert codes.dtype == np.int64
        assert [texts[c] for c in codes] == values


def test_many_short_lines_take_the_fast_reader(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A file under SMALL_BYTES with more than SMALL_ROWS lines (a reference file of a labelling
    campaign) is read by the fast reader, to the same table as the careful reader."""
    rows = "".join(f"P-{i:05d},{'ABC'[i % 3]}\n" for i in range(300))
    path = tmp_path / "reference.csv"
    path.write_text("item,reference\n" + rows + "\nP-99999, B \n", encoding="utf-8")
    careful = read_table(path, what="reference")
    monkeypatch.setattr(ratings_module, "SMALL_ROWS", 100)
    used: list[bool] = []
    real = ratings_module._parse_fast
    monkeypatch.setattr(ratings_module, "_parse_fast", lambda *a: used.append(True) or real(*a))  # type: ignore[func-returns-value]
    fast = read_table(path, what="reference")
    assert used == [True] and path.stat().st_size < ratings_module.SMALL_BYTES
    assert fast.lines.tolist() == careful.lines.tolist() == [*range(2, 302), 303]
    for a, b in zip(fast.columns, careful.columns, strict=True):
        assert a.name == b.name
        assert a.values().tolist() == b.values().tolist()
    assert fast.columns[1].values().tolist()[-1] == "B"  # trimmed
