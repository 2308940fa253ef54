"""pyarrow's CSV reader (``reportgen.ratings._parse_arrow``) gives what the careful readers give.

The columnar reader is taken for large, plain files only (no quote, no bare carriage return, no
blank line, the header's number of fields on every line).  These tests hold it to the stdlib
reader on the same bytes: the same column names, codes, distinct texts in the same order and
physical line numbers; and on irregular files it must step aside, so that the messages (file,
line, column, field) are word for word those of the stdlib reader.
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

import numpy as np
import pytest

import reportgen.ratings as ratings_module
from reportgen.errors import InputError
from reportgen.ratings import read_table


def _read(path: Path, monkeypatch: pytest.MonkeyPatch, *, fast: bool) -> tuple[Any, list[str]]:
    """read_table through the fast readers (``fast``) or the stdlib reader only; the outcome
    and which of pyarrow's attempts returned a table."""
    took: list[str] = []
    real = ratings_module._parse_arrow

    def spy(data: bytes, delimiter: str) -> Any:
        out = real(data, delimiter)
        took.append("arrow" if out is not None else "declined")
        return out

    with monkeypatch.context() as m:
        m.setattr(ratings_module, "_parse_arrow", spy)
        if fast:
            m.setattr(ratings_module, "SMALL_BYTES", 0)
            m.setattr(ratings_module, "SMALL_ROWS", 0)
        else:
            m.setattr(ratings_module, "SMALL_BYTES", 10**12)
            m.setattr(ratings_module, "SMALL_ROWS", 10**12)
        try:
            return read_table(path), took
        except InputError as exc:
            return str(exc), took


def _same_table(a: Any, b: Any) -> None:
    assert a.names() == b.names()
    assert a.lines.tolist() == b.lines.tolist()
    assert a.header_line == b.header_line
    assert (a.delimiter, a.encoding, a.sha256) == (b.delimiter, b.encoding, b.sha256)
    for ca, cb in zip(a.columns, b.columns, strict=True):
        assert ca.uniques == cb.uniques  # same distinct texts in the same (first-seen) order
        assert ca.codes.dtype == cb.codes.dtype == np.int64
        assert np.array_equal(ca.codes, cb.codes)


def _rows(seed: int, n: int = 3000) -> list[tuple[str, str, str, str]]:
    rng = np.random.default_rng(seed)
    cats = ["P", "S", " X", "Ré", "ok ", "合格", ""]
    return [
        (
            f"{rng.integers(0, 700):04d}",
            f"R{rng.integers(1, 6)}",
            str(rng.integers(1, 4)),
            cats[rng.integers(0, len(cats))],
        )
        for _ in range(n)
    ]


@pytest.mark.parametrize(
    ("delimiter", "newline", "final_newline", "prefix"),
    [
        (",", "\n", True, ""),
        (";", "\r\n", True, ""),
        ("\t", "\n", False, ""),
        (
            ",",
            "\r\n",
            False,
            "\n\nsep=,\n",
        ),  # blank lines and an Excel "sep=" line before the header
        (",", "\n", True, "\ufeff"),  # UTF-8 with a byte-order mark
    ],
)
def test_arrow_reader_gives_the_stdlib_arrays(
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    delimiter: str,
    newline: str,
    final_newline: bool,
    prefix: str,
) -> None:
    rows = _rows(len(newline) + ord(delimiter))
    lines = [delimiter.join(("item", "rater", "trial", "rating"))]
    lines += [delimiter.join(r) for r in rows]
    text = prefix + newline.join(lines) + (newline if final_newline else "")
    path = tmp_path / "r.csv"
    path.write_bytes(text.encode("utf-8"))
    fast, took = _read(path, monkeypatch, fast=True)
    slow, took_slow = _read(path, monkeypatch, fast=False)
    assert took == ["arrow"]  # the columnar reader was used (the old code had no such path)
    assert took_slow == []
    _same_table(fast, slow)
    # the texts are trimmed and kept exactly, and empty cells stay empty strings
    assert "X" in fast.columns[3].uniques and "合格" in fast.columns[3].uniques
    assert "" in fast.columns[3].uniques
    assert fast.columns[0].uniques[0] == rows[0][0]


def test_arrow_reader_on_a_long_file_with_a_reference_column(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Many items (more distinct texts than pyarrow's read blocks hold) keep first-seen order."""
    rng = np.random.default_rng(7)
    n = 60_000
    items = rng.permutation(n)
    body = "".join(
        f"U{i},R{int(r)},1,{int(c)},{int(c) % 3}\n"
        for i, r, c in zip(items, rng.integers(1, 4, n), rng.integers(1, 6, n), strict=True)
    )
    path = tmp_path / "big.csv"
    path.write_text("item,rater,trial,rating,reference\n" + body)
    fast, took = _read(path, monkeypatch, fast=True)
    slow, _ = _read(path, monkeypatch, fast=False)
    assert took == ["arrow"]
    _same_table(fast, slow)
    assert fast.columns[0].uniques[:3] == [f"U{i}" for i in items[:3]]


IRREGULAR = {
    "ragged row": "item,rater,trial,rating\n1,R1,1,P\n2,R1,1\n3,R1,1,P\n",
    "long row": "item,rater,trial,rating\n1,R1,1,P\n2,R1,1,P,extra\n",
    "blank line": "item,rater,trial,rating\n1,R1,1,P\n\n2,R1,1,Q\n",
    "quoted line break": 'item,rater,trial,rating\n1,R1,1,"P\nQ"\n2,R1,1,P\n',
    "stray quote": 'item,rater,trial,rating\n1,R1,1,P"\n2,R1,1,P\n',
    "bare carriage return": "item,rater,trial,rating\r1,R1,1,P\r2,R1,1,P\r",
    "value without a column name": "item,rater,trial,rating,\n1,R1,1,P,\n2,R1,1,P,oops\n",
    "duplicate header": "item,rater,trial,item\n1,R1,1,P\n",
    "header only": "item,rater,trial,rating\n",
    "cp1252 bytes": "item,rater,trial,rating\n1,R1,1,Ré\n2,R1,1,P\n",
}


@pytest.mark.parametrize("name", sorted(IRREGULAR))
def test_irregular_files_give_the_stdlib_messages(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, name: str
) -> None:
    text = IRREGULAR[name]
    path = tmp_path / "odd.csv"
    path.write_bytes(text.encode("cp1252" if name == "cp1252 bytes" else "utf-8"))
    fast, took = _read(path, monkeypatch, fast=True)
    slow, _ = _read(path, monkeypatch, fast=False)
    if isinstance(slow, str):
        assert fast == slow  # the same message, word for word (file, line, column)
        assert re.search(r"odd\.csv:\d+: error", slow)  # file and physical line
    else:  # readable after all (pandas' reader took it): the same records, line by line
        assert fast.names() == slow.names() and fast.lines.tolist() == slow.lines.tolist()
        for ca, cb in zip(fast.columns, slow.columns, strict=True):
            assert ca.values().tolist() == cb.values().tolist()
    if name in ("ragged row", "long row", "blank line", "quoted line break", "stray quote"):
        assert took == ["declined"]


def test_ragged_row_message_names_the_physical_line(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    rows = ["item,rater,trial,rating"] + [f"{i},R1,1,P" for i in range(500)]
    rows[321] = "320,R1,1"  # physical line 322
    path = tmp_path / "ragged.csv"
    path.write_text("\n".join(rows) + "\n")
    fast, took = _read(path, monkeypatch, fast=True)
    slow, _ = _read(path, monkeypatch, fast=False)
    assert took == ["declined"]
    assert isinstance(fast, str) and fast == slow
    assert "ragged.csv:322" in fast
