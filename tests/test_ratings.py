"""Ratings intake: layouts, encodings, delimiters, xlsx, coded labels, and every bad input.

Line numbers in the expectations are physical lines of the files written here: with the
default study (30 items, raters R1-R3, 2 trials), ratings row k (0-based) is on line k + 2 and
is ordered rater, trial, item (R1 trial 1 items I01-I30 on lines 2-31, R1 trial 2 on 32-61 …).
"""

from __future__ import annotations

import codecs
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from conftest import DEFAULT_CATEGORIES, default_ratings, default_reference

import reportgen.ratings as ratings_module
from reportgen.errors import InputError
from reportgen.model import MISSING
from reportgen.ratings import load_ratings, read_table
from reportgen.study import load_study

CODES = [c["code"] for c in DEFAULT_CATEGORIES]


@pytest.fixture(params=["careful", "fast"])
def reader(request: pytest.FixtureRequest, monkeypatch: pytest.MonkeyPatch) -> str:
    """Run a test with the stdlib reader (small files) and with the pandas fast path."""
    if request.param == "fast":
        monkeypatch.setattr(ratings_module, "SMALL_BYTES", 0)
        monkeypatch.setattr(ratings_module, "SMALL_ROWS", 0)
    return str(request.param)


RATERS = ["R1", "R2", "R3"]
REF = default_reference(30, CODES)
ROWS = default_ratings(REF, RATERS, 2, CODES)


def long_csv(
    rows: list[Any], header: str = "item,rater,trial,rating", sep: str = ",", end: str = "\n"
) -> str:
    return header.replace(",", sep) + end + "".join(sep.join(str(x) for x in r) + end for r in rows)


def ref_csv(rows: list[tuple[str, str]]) -> str:
    return "item,reference\n" + "".join(f"{i},{c}\n" for i, c in rows)


def load(path: Path) -> Any:
    return load_ratings(load_study(path))


def messages(path: Path) -> str:
    with pytest.raises(InputError) as info:
        load(path)
    return "\n".join(p.format() for p in info.value.problems())


def expected_codes() -> np.ndarray:
    out = np.full((30, 3, 2), MISSING, dtype=np.int8)
    for item, rater, trial, code in ROWS:
        out[int(item[1:]) - 1, RATERS.index(rater), trial - 1] = CODES.index(code)
    return out


# ---------------------------------------------------------------------------------------------
# Good input
# ---------------------------------------------------------------------------------------------


def test_long_csv_dense_array(make_study, reader: str) -> None:
    r = load(make_study())
    assert r.items == tuple(f"I{i:02d}" for i in range(1, 31))
    assert r.raters == ("R1", "R2", "R3") and r.categories == ("P", "S", "X")
    assert r.codes.dtype == np.int8 and r.codes.shape == (30, 3, 2)
    np.testing.assert_array_equal(r.codes, expected_codes())
    np.testing.assert_array_equal(
        r.reference, np.array([CODES.index(c) for _, c in REF], dtype=np.int8)
    )
    assert [s.role for s in r.sources] == ["ratings", "reference"]
    assert (
        r.sources[0].rows == 180
        and r.sources[0].layout == "long"
        and len(r.sources[0].sha256) == 64
    )
    assert r.notes == ()
    # the tidy table round-trips
    table = r.long_table()
    assert len(table) == 180
    assert set(map(tuple, table.itertuples(index=False, name=None))) == {
        (i, ra, t, c) for i, ra, t, c in ROWS
    }


def test_items_in_order_of_first_appearance_and_kept_as_text(make_study) -> None:
    rows = [
        ("007", "R1", 1, "P"),
        ("10", "R1", 1, "S"),
        ("7", "R1", 1, "X"),
        ("007 ", "R2", 1, "P"),
        ("10", "R2", 1, "S"),
        ("7", "R2", 1, "X"),
    ]
    r = load(make_study(ratings_text=long_csv(rows), raters=["R1", "R2"], trials=1, reference=None))
    assert r.items == ("007", "10", "7")
    assert r.codes[:, :, 0].tolist() == [[0, 0], [1, 1], [2, 2]]
    assert r.reference is None


def test_numeric_codes_match_as_text(make_study) -> None:
    cats = [{"code": 1, "label": "one"}, {"code": 2, "label": "two"}]
    rows = [("a", "R1", 1, "1"), ("b", "R1", 1, " 2 ")]
    r = load(
        make_study(
            categories=cats, raters=["R1"], trials=1, reference=None, ratings_text=long_csv(rows)
        )
    )
    assert r.categories == ("1", "2") and r.codes[:, 0, 0].tolist() == [0, 1]
    msg = messages(
        make_study(
            tmp_path_of(r),
            categories=cats,
            raters=["R1"],
            trials=1,
            reference=None,
            ratings_text=long_csv([("a", "R1", 1, "01")]),
        )
    )
    assert "ratings.csv:2: error: rating: unknown category '01'" in msg


def tmp_path_of(r: Any) -> Path:
    return Path(r.sources[0].path).parent.parent / "other"


def test_trial_column_optional_with_one_trial(make_study) -> None:
    rows = [(i, ra, c) for i, ra, t, c in ROWS if t == 1]
    r = load(make_study(trials=1, ratings_text=long_csv(rows, header="item,rater,rating")))
    assert r.codes.shape == (30, 3, 1)
    np.testing.assert_array_equal(r.codes[:, :, 0], expected_codes()[:, :, 0])


def test_reference_column_in_ratings(make_study) -> None:
    refd = dict(REF)
    rows = [(i, ra, t, c, refd[i]) for i, ra, t, c in ROWS]
    r = load(
        make_study(
            reference=None, ratings_text=long_csv(rows, header="item,rater,trial,rating,reference")
        )
    )
    np.testing.assert_array_equal(
        r.reference, np.array([CODES.index(c) for _, c in REF], dtype=np.int8)
    )
    # blank on some rows is fine when another row of the item carries it
    rows = [(i, ra, t, c, refd[i] if ra == "R1" and t == 1 else "") for i, ra, t, c in ROWS]
    r = load(
        make_study(
            Path(r.sources[0].path).parent.parent / "b",
            reference=None,
            ratings_text=long_csv(rows, header="item,rater,trial,rating,reference"),
        )
    )
    assert (r.reference >= 0).all()


def test_header_case_spaces_and_column_order(make_study) -> None:
    rows = [(c, t, ra, i) for i, ra, t, c in ROWS]
    r = load(make_study(ratings_text=long_csv(rows, header=" Rating ,TRIAL, Rater,Item")))
    np.testing.assert_array_equal(r.codes, expected_codes())


@pytest.mark.parametrize(
    ("name", "make_text"),
    [
        ("semicolon", lambda: long_csv(ROWS, sep=";")),
        ("tab", lambda: long_csv(ROWS, sep="\t")),
        ("crlf", lambda: long_csv(ROWS, end="\r\n")),
        ("excel-sep-line", lambda: "sep=;\n" + long_csv(ROWS, sep=";")),
        ("excel-sep-tab-line", lambda: "sep=\t\n" + long_csv(ROWS, sep="\t")),
        (
            "stray-spaces",
            lambda: (
                "item , rater,trial , rating\n"
                + "".join(f" {i} ,{r} , {t},{c}  \n" for i, r, t, c in ROWS)
            ),
        ),
        (
            "trailing-empty-columns",
            lambda: (
                "item,rater,trial,rating,,\n"
                + "".join(f"{i},{r},{t},{c},,\n" for i, r, t, c in ROWS)
            ),
        ),
        (
            "blank-lines",
            lambda: (
                "\n"
                + long_csv(ROWS[:50])
                + "\n\n"
                + "".join(f"{i},{r},{t},{c}\n" for i, r, t, c in ROWS[50:])
                + "\n"
            ),
        ),
        (
            "quoted",
            lambda: (
                "item,rater,trial,rating\n"
                + "".join(f'"{i}","{r}",{t},"{c}"\n' for i, r, t, c in ROWS)
            ),
        ),
        ("no-final-newline", lambda: long_csv(ROWS).rstrip("\n")),
        (
            "ragged-trailing-empties",
            lambda: (
                long_csv(ROWS[:10]) + "".join(f"{i},{r},{t},{c},,\n" for i, r, t, c in ROWS[10:])
            ),
        ),
    ],
)
def test_csv_variants_read_the_same(
    make_study, reader: str, name: str, make_text: Callable[[], str]
) -> None:
    r = load(make_study(ratings_text=make_text()))
    np.testing.assert_array_equal(r.codes, expected_codes())
    assert r.items[0] == "I01"


@pytest.mark.parametrize(
    ("encoding", "note"),
    [("utf-8-sig", None), ("utf-16", None), ("cp1252", "read as Windows-1252 (cp1252)")],
)
def test_encodings(make_study, reader: str, encoding: str, note: str | None) -> None:
    rows = [(i.replace("I01", "Ï01"), r, t, c) for i, r, t, c in ROWS]
    ref = [(i.replace("I01", "Ï01"), c) for i, c in REF]
    text = long_csv(rows, sep="\t" if encoding == "utf-16" else ",")
    data = text.encode(encoding)
    if encoding == "utf-16":
        assert data.startswith((codecs.BOM_UTF16_LE, codecs.BOM_UTF16_BE))
    r = load(make_study(ratings_text=data, reference_rows=ref))
    assert r.items[0] == "Ï01"
    np.testing.assert_array_equal(r.codes, expected_codes())
    assert r.sources[0].encoding == encoding
    if note:
        assert any(note in n and "line 2" in n for n in r.notes), r.notes
    else:
        assert r.notes == ()


def test_quoted_newline_keeps_physical_lines(tmp_path: Path) -> None:
    text = 'item,rater,note\n"a",R1,"two\nlines"\nb,R2,x\n"c",R3,"3\n4\n5"\nd,,y\n'
    (tmp_path / "t.csv").write_text(text)
    t = read_table(tmp_path / "t.csv")
    assert t.lines.tolist() == [2, 4, 5, 8]
    assert t.columns[2].values().tolist() == ["two\nlines", "x", "3\n4\n5", "y"]


def test_fast_and_careful_readers_agree(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(ratings_module, "SMALL_BYTES", 0)
    monkeypatch.setattr(ratings_module, "SMALL_ROWS", 0)
    rng = np.random.default_rng(3)
    rows = [
        (
            f"{rng.integers(0, 999):03d}",
            f"R{rng.integers(1, 5)}",
            int(rng.integers(1, 3)),
            str(rng.choice(["P", "S", " X"])),
        )
        for _ in range(2000)
    ]
    plain = long_csv(rows)
    quoted = "item,rater,trial,rating\n" + "".join(f'"{i}",{r},{t},"{c}"\n' for i, r, t, c in rows)
    (tmp_path / "a.csv").write_text(plain)
    (tmp_path / "b.csv").write_text(quoted)
    used: list[bool] = []
    real = ratings_module._parse_fast

    def spy(body: str, delimiter: str, data: bytes | None = None) -> Any:
        out = real(body, delimiter, data)
        used.append(out is not None)
        return out

    monkeypatch.setattr(ratings_module, "_parse_fast", spy)
    a, b = read_table(tmp_path / "a.csv"), read_table(tmp_path / "b.csv")
    assert used == [True, True]  # well-formed quotes without line breaks stay on the fast path
    assert a.lines.tolist() == b.lines.tolist() == list(range(2, 2002))
    for ca, cb in zip(a.columns, b.columns, strict=True):
        assert ca.values().tolist() == cb.values().tolist()
    assert a.columns[3].uniques == sorted(set(a.columns[3].uniques), key=a.columns[3].uniques.index)
    assert "X" in a.columns[3].uniques and " X" not in a.columns[3].uniques


# ---------------------------------------------------------------------------------------------
# Wide layout and xlsx
# ---------------------------------------------------------------------------------------------


def wide_csv(with_reference: bool = False, single: bool = False) -> str:
    exp = expected_codes()
    trials = 1 if single else 2
    cols = [r if single else f"{r}/{t + 1}" for r in RATERS for t in range(trials)]
    head = "item," + ("reference," if with_reference else "") + ",".join(cols)
    out = [head]
    for i, (item, ref) in enumerate(REF):
        cells = [CODES[exp[i, r, t]] for r in range(3) for t in range(trials)]
        out.append(",".join([item, *([ref] if with_reference else []), *cells]))
    return "\n".join(out) + "\n"


def test_wide_layout(make_study) -> None:
    r = load(make_study(ratings_text=wide_csv()))
    np.testing.assert_array_equal(r.codes, expected_codes())
    assert r.sources[0].layout == "wide"


def test_wide_layout_reference_column_and_rater_only_names(make_study) -> None:
    r = load(
        make_study(
            trials=1, reference=None, ratings_text=wide_csv(with_reference=True, single=True)
        )
    )
    np.testing.assert_array_equal(r.codes[:, :, 0], expected_codes()[:, :, 0])
    assert r.reference is not None and r.reference.tolist() == [CODES.index(c) for _, c in REF]


def blank_wide_cell(row: int, col: int) -> str:
    """The wide CSV with data row ``row`` (0-based), column ``col`` (0 = item) left blank."""
    lines = wide_csv().splitlines()
    cells = lines[row + 1].split(",")
    cells[col] = ""
    lines[row + 1] = ",".join(cells)
    return "\n".join(lines) + "\n"


def test_wide_blank_cells_absent_when_allowed(make_study) -> None:
    study = make_study(missing="allow", ratings_text=blank_wide_cell(1, 3))  # R2/1 of I02
    r = load(study)
    assert r.codes[1, 1, 0] == MISSING and int((r.codes == MISSING).sum()) == 1
    assert any("1 of 180 ratings absent" in n for n in r.notes)


def write_xlsx(path: Path, sheets: dict[str, list[list[Any]]]) -> None:
    import openpyxl

    wb = openpyxl.Workbook()
    wb.remove(wb.active)
    for title, rows in sheets.items():
        ws = wb.create_sheet(title)
        for row in rows:
            ws.append(row)
    wb.save(path)


def test_xlsx_long_first_sheet_and_named_sheet(make_study, tmp_path: Path) -> None:
    rows = [["item", "rater", "trial", "rating"], *[[i, r, t, c] for i, r, t, c in ROWS]]
    folder = tmp_path / "x"
    folder.mkdir()
    write_xlsx(folder / "r.xlsx", {"Ratings": rows, "Other": [["nothing"]]})
    r = load(make_study(folder, ratings="r.xlsx"))
    np.testing.assert_array_equal(r.codes, expected_codes())
    assert r.sources[0].layout == "xlsx-long"
    write_xlsx(folder / "s.xlsx", {"Notes": [["x"]], "Data": rows})
    (folder / "study.yaml").unlink()
    r = load(make_study(folder, ratings={"file": "s.xlsx", "sheet": "Data"}))
    np.testing.assert_array_equal(r.codes, expected_codes())


def test_xlsx_numbers_and_wide(make_study, tmp_path: Path) -> None:
    cats = [{"code": 1, "label": "good"}, {"code": 2, "label": "bad"}]
    rows = [["item", "R1/1", "R1/2"], [7, 1, 2.0], ["007", 2, 1], [None, None, None], [8, 1, 1]]
    folder = tmp_path / "w"
    folder.mkdir()
    write_xlsx(folder / "w.xlsx", {"S": rows})
    r = load(
        make_study(
            folder,
            ratings="w.xlsx",
            categories=cats,
            raters=["R1"],
            reference=None,
            scale="nominal",
        )
    )
    assert r.items == ("7", "007", "8")
    assert r.codes[:, 0, :].tolist() == [[0, 1], [1, 0], [0, 0]]
    assert r.sources[0].layout == "xlsx-wide"


def test_xlsx_problems_name_the_cell(make_study, tmp_path: Path) -> None:
    rows = [["item", "rater", "trial", "rating"], *[[i, r, t, c] for i, r, t, c in ROWS]]
    rows[5][3] = "Q"
    folder = tmp_path / "e"
    folder.mkdir()
    write_xlsx(folder / "r.xlsx", {"Ratings": rows})
    msg = messages(make_study(folder, ratings="r.xlsx"))
    assert "r.xlsx:6: error: rating: cell D6: unknown category 'Q'" in msg
    (folder / "study.yaml").unlink()
    msg = messages(make_study(folder, ratings={"file": "r.xlsx", "sheet": "Ratngs"}))
    assert "no sheet named 'Ratngs'; sheets: Ratings" in msg and "did you mean 'Ratings'?" in msg


def test_xlsx_refused_when_not_a_workbook(make_study) -> None:
    msg = messages(make_study(ratings="r.xlsx", files={"r.xlsx": b"not a zip"}))
    assert "r.xlsx: error: not a valid .xlsx workbook" in msg


# ---------------------------------------------------------------------------------------------
# Coded labels (plan key)
# ---------------------------------------------------------------------------------------------


def keyed(
    make_study: Any,
    edit: Callable[[list[list[Any]]], None] | None = None,
    key_edit: Callable[[list[str]], None] | None = None,
) -> Path:
    labels = {
        (item, t): f"K{(n * 37 + t * 11) % 997:03d}"
        for n, (item, _) in enumerate(REF)
        for t in (1, 2)
    }
    key_lines = ["label,item,trial", *[f"{lab},{item},{t}" for (item, t), lab in labels.items()]]
    if key_edit:
        key_edit(key_lines)
    rows = [[labels[(i, t)], r, c] for i, r, t, c in ROWS]
    if edit:
        edit(rows)
    text = "item,rater,rating\n" + "".join(",".join(map(str, row)) + "\n" for row in rows)
    return make_study(
        key="key.csv", ratings_text=text, files={"key.csv": "\n".join(key_lines) + "\n"}
    )


def test_key_decodes_labels(make_study) -> None:
    r = load(keyed(make_study))
    assert r.items == tuple(i for i, _ in REF)  # key order
    np.testing.assert_array_equal(r.codes, expected_codes())
    assert [s.role for s in r.sources] == ["ratings", "reference", "key"]


def test_key_problems(make_study, tmp_path: Path) -> None:
    def bad(rows: list[list[Any]]) -> None:
        rows[3][0] = "ZZZ"
        rows[10][0] = rows[9][0]

    msg = messages(keyed(make_study, bad))
    assert "ratings.csv:5: error: item: label 'ZZZ' is not in the key" in msg
    assert (
        "ratings.csv:12: error: rating: label" in msg
        and "used twice by rater R1" in msg
        and "also on line 11" in msg
    )


def test_key_file_problems(make_study) -> None:
    def dup(lines: list[str]) -> None:
        lines.append(lines[1])

    msg = messages(keyed(make_study, key_edit=dup))
    assert (
        "key.csv:62: error: label: label" in msg
        and "appears twice in the key; first on line 2" in msg
    )


# ---------------------------------------------------------------------------------------------
# Bad input: one row per case of issue 2, item 5 (and the structural ones)
# ---------------------------------------------------------------------------------------------


def with_row(index: int, row: tuple[Any, ...]) -> str:
    rows = list(ROWS)
    rows[index] = row
    return long_csv(rows)


BAD: list[tuple[str, dict[str, Any], list[str]]] = [
    (
        "unknown-category",
        {"ratings_text": with_row(3, ("I04", "R1", 1, "Sx"))},
        ["ratings.csv:5: error: rating: unknown category 'Sx'", "did you mean 'S'?"],
    ),
    (
        "unknown-category-case",
        {"ratings_text": with_row(3, ("I04", "R1", 1, "p"))},
        ["ratings.csv:5:", "unknown category 'p'", "did you mean 'P'?"],
    ),
    (
        "unknown-category-many",
        {"ratings_text": long_csv([(i, r, t, "Q" if c == "X" else c) for i, r, t, c in ROWS])},
        [
            f"ratings.csv:4: error: rating: unknown category 'Q' ({sum(r[3] == 'X' for r in ROWS)} rows; first here)",
            "declared codes: P, S, X",
        ],
    ),
    (
        "undeclared-rater",
        {"ratings_text": with_row(40, ("I09", "r2", 2, "P"))},
        ["ratings.csv:42: error: rater: undeclared rater 'r2'", "did you mean 'R2'?"],
    ),
    (
        "undeclared-rater-far",
        {"ratings_text": with_row(40, ("I09", "Zed", 2, "P"))},
        ["ratings.csv:42:", "undeclared rater 'Zed'", "declared raters: R1, R2, R3"],
    ),
    (
        "trial-out-of-range",
        {"ratings_text": with_row(7, ("I08", "R1", 3, "P"))},
        ["ratings.csv:9: error: trial: trial 3 is out of range: the study has 2 trial(s)"],
    ),
    (
        "trial-not-number",
        {"ratings_text": with_row(7, ("I08", "R1", "one", "P"))},
        ["ratings.csv:9: error: trial: trial must be a whole number from 1 to 2, got 'one'"],
    ),
    (
        "trial-zero",
        {"ratings_text": with_row(7, ("I08", "R1", 0, "P"))},
        ["ratings.csv:9:", "trial 0 is out of range"],
    ),
    (
        "duplicate",
        {"ratings_text": long_csv([*ROWS, ("I05", "R2", 1, "S")])},
        [
            "ratings.csv:182: error: rating: second rating for item 'I05', rater R2, trial 1; first on line 66"
        ],
    ),
    (
        "missing-ratings-few",
        {"ratings_text": long_csv(ROWS[:4] + ROWS[5:])},
        [
            "ratings.csv: error: rating: no rating for item 'I05' by rater R1 in trial 1",
            "missing: allow",
        ],
    ),
    (
        "missing-ratings-many",
        {"ratings_text": long_csv([r for r in ROWS if not (r[1] == "R3" and r[2] == 2)])},
        [
            "ratings.csv: error: rating: rater R3, trial 2: 30 item(s) without a rating ('I01', 'I02', 'I03', 'I04', 'I05', …)",
            "30 ratings missing in all",
        ],
    ),
    (
        "reference-missing",
        {"reference_rows": REF[:-2]},
        [
            "reference.csv: error: item: no reference for rated item 'I29'",
            "no reference for rated item 'I30'",
        ],
    ),
    (
        "reference-for-unrated",
        {"reference_rows": [*REF, ("I99", "P")]},
        ["reference.csv:32: error: item: reference given for item 'I99', which has no ratings"],
    ),
    (
        "sep-line-and-blank-lines-offset",
        {"ratings_text": "sep=;\n\n" + with_row(3, ("I04", "R1", 1, "Sx")).replace(",", ";")},
        ["ratings.csv:7: error: rating: unknown category 'Sx'"],
    ),
    (
        "two-references-file",
        {"reference_rows": [*REF, ("I03", "P")]},
        ["reference.csv:32: error: item: two references for item 'I03'; first on line 4"],
    ),
    (
        "two-references-column",
        {
            "reference": None,
            "ratings_text": long_csv(
                [
                    (i, r, t, c, "X" if (i == "I02" and r == "R3") else dict(REF)[i])
                    for i, r, t, c in ROWS
                ],
                header="item,rater,trial,rating,reference",
            ),
        },
        [
            "ratings.csv:123: error: reference: two references for item 'I02': 'X' here, 'S' on line 3",
            "an item has one reference category",
        ],
    ),
    (
        "reference-column-and-file",
        {
            "ratings_text": long_csv(
                [(i, r, t, c, "P") for i, r, t, c in ROWS],
                header="item,rater,trial,rating,reference",
            )
        },
        ["study.yaml:", "reference: the reference is given twice"],
    ),
    (
        "reference-unknown-code",
        {"reference_rows": [("I01", "Z"), *REF[1:]]},
        ["reference.csv:2: error: reference: unknown category 'Z'"],
    ),
    (
        "reference-blank",
        {"reference_rows": [("I01", ""), *REF[1:]]},
        ["reference.csv:2: error: reference: blank reference cell"],
    ),
    ("empty-ratings", {"ratings_text": ""}, ["ratings.csv:1: error: the ratings file is empty"]),
    (
        "empty-ratings-whitespace",
        {"ratings_text": "\n\n  \n"},
        ["ratings.csv:1: error: the ratings file is empty"],
    ),
    (
        "header-only",
        {"ratings_text": "item,rater,trial,rating\n"},
        ["ratings.csv:1: error: the ratings file has a header but no ratings"],
    ),
    (
        "empty-reference",
        {"reference_text": ""},
        ["reference.csv:1: error: the reference file is empty"],
    ),
    (
        "blank-rating",
        {"ratings_text": with_row(3, ("I04", "R1", 1, " "))},
        ["ratings.csv:5: error: rating: blank rating cell", "every rating is required"],
    ),
    (
        "blank-item",
        {"ratings_text": with_row(3, ("", "R1", 1, "P"))},
        ["ratings.csv:5: error: item: blank item cell"],
    ),
    (
        "blank-rater",
        {"ratings_text": with_row(3, ("I04", "", 1, "P"))},
        ["ratings.csv:5: error: rater: blank rater cell"],
    ),
    (
        "header-absent",
        {"ratings_text": long_csv(ROWS)[len("item,rater,trial,rating\n") :]},
        [
            "ratings.csv:1: error: no header line: the first line must name the columns, found 'I01,R1,1,P'"
        ],
    ),
    (
        "header-misspelt",
        {"ratings_text": long_csv(ROWS, header="item,rater,trial,ratng")},
        ["ratings.csv:1: error: ratng: unknown column 'ratng'", "did you mean 'rating'?"],
    ),
    (
        "header-misspelt-rater",
        {"ratings_text": long_csv(ROWS, header="item,raters,trial,rating")},
        ["ratings.csv:1: error: raters: unknown column 'raters'", "did you mean 'rater'?"],
    ),
    (
        "header-trial-missing",
        {"ratings_text": long_csv([(i, r, c) for i, r, t, c in ROWS], header="item,rater,rating")},
        ["ratings.csv:1: error: no 'trial' column", "trials: 1"],
    ),
    (
        "header-duplicate",
        {"ratings_text": long_csv(ROWS, header="item,rater,trial,Item")},
        ["ratings.csv:1: error: Item: duplicate column 'Item' (columns 1 and 4)"],
    ),
    (
        "header-empty-name",
        {
            "ratings_text": long_csv(
                [(i, r, t, "", c) for i, r, t, c in ROWS], header="item,rater,trial,,rating"
            )
        },
        ["ratings.csv:1: error: column 4 has no name"],
    ),
    (
        "short-row",
        {"ratings_text": long_csv(ROWS[:9]) + "I10,R1,1\n" + long_csv(ROWS[10:])[24:]},
        ["ratings.csv:11: error: expected 4 fields, found 3"],
    ),
    (
        "long-row",
        {"ratings_text": long_csv(ROWS[:9]) + "I10,R1,1,P,extra\n" + long_csv(ROWS[10:])[24:]},
        ["ratings.csv:11: error: expected 4 fields, found 5"],
    ),
    (
        "stray-value-unnamed-column",
        {
            "ratings_text": "item,rater,trial,rating,\n"
            + "".join(
                f"{i},{r},{t},{c},{'oops' if i == 'I03' and r == 'R1' and t == 1 else ''}\n"
                for i, r, t, c in ROWS
            )
        },
        ["ratings.csv:4: error: a value ('oops') under a column without a name (column 5)"],
    ),
    (
        "bad-quote",
        {"ratings_text": long_csv(ROWS[:2]) + 'I03,R1,1,"P"x\n' + long_csv(ROWS[3:])[24:]},
        ["ratings.csv:4: error: cannot read this line as CSV"],
    ),
    (
        "wide-unknown-column",
        {"ratings_text": wide_csv().replace("R2/2", "R2/3", 1)},
        [
            "ratings.csv:1: error: R2/3: unknown column 'R2/3'",
            "did you mean",
            "no column for rater R2, trial 2 (expected R2/2)",
        ],
    ),
    (
        "wide-blank-cell",
        {"ratings_text": blank_wide_cell(4, 1)},
        ["ratings.csv:6: error: R1/1: blank rating cell", "every rating is required"],
    ),
    (
        "wide-repeated-item",
        {"ratings_text": wide_csv() + wide_csv().splitlines()[3] + "\n"},
        ["ratings.csv:32: error: item: item 'I03' has a second row; first on line 4"],
    ),
    (
        "wide-first-column",
        {"ratings_text": "part" + wide_csv()[4:]},
        ["ratings.csv:1: error: part: the first column of a wide ratings file must be 'item'"],
    ),
]


@pytest.mark.parametrize(("case", "overrides", "fragments"), BAD, ids=[b[0] for b in BAD])
def test_bad_input(
    make_study,
    reader: str,
    tmp_path: Path,
    monkeypatch: pytest.MonkeyPatch,
    case: str,
    overrides: dict[str, Any],
    fragments: list[str],
) -> None:
    path = make_study(**overrides)
    monkeypatch.chdir(path.parent)
    before = sorted(p.name for p in path.parent.iterdir())
    msg = messages(Path("study.yaml"))
    for f in fragments:
        assert f in msg, f"{case}: {f!r} not in\n{msg}"
    assert sorted(p.name for p in path.parent.iterdir()) == before  # nothing written


def test_problem_limit_and_summary(make_study, monkeypatch: pytest.MonkeyPatch) -> None:
    rows = [(i, r, t, "" if r == "R1" else c) for i, r, t, c in ROWS]
    path = make_study(ratings_text=long_csv(rows))
    monkeypatch.chdir(path.parent)
    with pytest.raises(InputError) as info:
        load(Path("study.yaml"))
    found = info.value.problems()
    blank = [p for p in found if p.message == "blank rating cell"]
    assert len(blank) == 10
    assert [p.location.line for p in blank] == list(range(2, 12))
    assert found[-1].message == "50 more blank rating cells not listed"


def test_many_kinds_all_reported(make_study, monkeypatch: pytest.MonkeyPatch) -> None:
    rows = list(ROWS)
    rows[0] = ("I01", "R9", 1, "P")
    rows[1] = ("I02", "R1", 5, "P")
    rows[2] = ("I03", "R1", 1, "W")
    path = make_study(ratings_text=long_csv(rows), reference_rows=[*REF, ("I77", "P")])
    monkeypatch.chdir(path.parent)
    msg = messages(Path("study.yaml"))
    for f in (
        "ratings.csv:2: error: rater: undeclared rater 'R9'",
        "ratings.csv:3: error: trial: trial 5 is out of range",
        "ratings.csv:4: error: rating: unknown category 'W'",
        "reference.csv:32:",
    ):
        assert f in msg, msg


def test_missing_allowed(make_study) -> None:
    rows = [r for r in ROWS if not (r[1] == "R2" and r[0] in ("I01", "I02"))]
    rows = [r for r in rows if r[1] != "R3"]
    r = load(make_study(missing="allow", ratings_text=long_csv(rows)))
    assert int((r.codes == MISSING).sum()) == 4 + 60
    assert (r.codes[:, 2, :] == MISSING).all()
    assert "64 of 180 ratings absent (missing: allow)" in r.notes
    assert "no ratings at all from rater(s) R3" in r.notes


def test_blank_rating_is_absent_when_allowed(make_study) -> None:
    r = load(make_study(missing="allow", ratings_text=with_row(3, ("I04", "R1", 1, ""))))
    assert r.codes[3, 0, 0] == MISSING


def test_unknown_extra_column_is_ignored_with_a_note(make_study) -> None:
    rows = [(i, r, t, c, "2026-01-05") for i, r, t, c in ROWS]
    r = load(make_study(ratings_text=long_csv(rows, header="item,rater,trial,rating,timestamp")))
    np.testing.assert_array_equal(r.codes, expected_codes())
    assert any("column 'timestamp' ignored" in n for n in r.notes)


@pytest.mark.slow
def test_large_file_fast_path(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(ratings_module, "SMALL_BYTES", 0)
    monkeypatch.setattr(ratings_module, "SMALL_ROWS", 0)
    used: list[bool] = []
    real = ratings_module._parse_fast
    monkeypatch.setattr(ratings_module, "_parse_fast", lambda *a: used.append(True) or real(*a))
    rng = np.random.default_rng(11)
    n_items, n_raters = 5000, 20
    codes = rng.integers(0, 3, size=(n_items, n_raters))
    keep = rng.random((n_items, n_raters)) >= 0.05
    lines = ["item,rater,trial,rating"]
    for i in range(n_items):
        for r in range(n_raters):
            if keep[i, r]:
                lines.append(f"I{i:05d},R{r + 1},1,{CODES[codes[i, r]]}")
    raters = ", ".join(f"R{r + 1}" for r in range(n_raters))
    (tmp_path / "ratings.csv").write_text("\n".join(lines) + "\n")
    (tmp_path / "study.yaml").write_text(
        f"study: {{id: BIG, title: Big}}\nscale: nominal\ncategories: [P, S, X]\nraters: [{raters}]\ntrials: 1\nmissing: allow\nratings: ratings.csv\n"
    )
    r = load(tmp_path / "study.yaml")
    want = np.where(keep, codes, MISSING).astype(np.int8)
    seen = np.flatnonzero(keep.any(axis=1))
    np.testing.assert_array_equal(r.codes[:, :, 0], want[seen])
    assert r.items[:2] == ("I00000", "I00001") and used == [True]


def test_key_needs_long_layout(make_study) -> None:
    path = make_study(
        key="key.csv", ratings_text=wide_csv(), files={"key.csv": "label,item,trial\nK1,I01,1\n"}
    )
    assert "ratings.csv:1: error: coded labels need the long layout" in messages(path)


def test_key_trial_must_agree(make_study) -> None:
    text = "item,rater,trial,rating\nA1,R1,2,P\n"
    key = "label,item,trial\nA1,I01,1\n"
    msg = messages(
        make_study(key="key.csv", reference=None, ratings_text=text, files={"key.csv": key})
    )
    assert (
        "ratings.csv:2: error: trial: trial 2 does not match the key: label 'A1' is trial 1" in msg
    )


def test_label_column_anywhere(make_study) -> None:
    text = "rater,rating,label\nR1,P,A1\nR1,S,A1\n"
    key = "label,item,trial\nA1,I01,1\n"
    msg = messages(
        make_study(
            key="key.csv", reference=None, trials=1, ratings_text=text, files={"key.csv": key}
        )
    )
    assert (
        "ratings.csv:3: error: rating: label 'A1' used twice by rater R1" in msg
        and "also on line 2" in msg
    )


def test_fast_path_quoted_delimiters_and_escapes(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    text = 'item,rater,note\n"A,1",R1,"say ""hi"""\nB,R2,""\n"C ""x""",R3,plain\n'
    (tmp_path / "t.csv").write_text(text)
    careful = read_table(tmp_path / "t.csv")
    monkeypatch.setattr(ratings_module, "SMALL_BYTES", 0)
    monkeypatch.setattr(ratings_module, "SMALL_ROWS", 0)
    used: list[bool] = []
    real = ratings_module._parse_fast
    monkeypatch.setattr(
        ratings_module, "_parse_fast", lambda *a: used.append(real(*a) is not None) or real(*a)
    )
    fast = read_table(tmp_path / "t.csv")
    assert used == [True]
    for t in (careful, fast):
        assert t.lines.tolist() == [2, 3, 4]
        assert [c.values().tolist() for c in t.columns] == [
            ["A,1", "B", 'C "x"'],
            ["R1", "R2", "R3"],
            ['say "hi"', "", "plain"],
        ]


@pytest.mark.parametrize("bad", ['"A"x,R1,n\n', 'A,R1,"open\n', 'A, "R1",n\n'])
def test_fast_path_leaves_odd_quotes_to_the_careful_reader(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch, bad: str
) -> None:
    monkeypatch.setattr(ratings_module, "SMALL_BYTES", 0)
    monkeypatch.setattr(ratings_module, "SMALL_ROWS", 0)
    data = ("item,rater,note\nB,R2,x\n" + bad).encode()
    assert ratings_module._parse_fast(data.decode(), ",", data) is None


def test_xlsx_unpacked_size_cap(
    make_study, monkeypatch: pytest.MonkeyPatch, tmp_path: Path
) -> None:
    folder = tmp_path / "cap"
    folder.mkdir()
    write_xlsx(
        folder / "r.xlsx", {"S": [["item", "rater", "trial", "rating"], *[list(r) for r in ROWS]]}
    )
    monkeypatch.setattr(ratings_module, "MAX_XLSX_UNZIPPED", 1000)
    msg = messages(make_study(folder, ratings="r.xlsx"))
    assert "r.xlsx: error: the workbook unpacks to" in msg and "the limit is 1,000" in msg


def test_xlsx_needs_defusedxml(make_study, monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    import openpyxl

    folder = tmp_path / "dx"
    folder.mkdir()
    write_xlsx(folder / "r.xlsx", {"S": [["item", "rater", "trial", "rating"]]})
    monkeypatch.setattr(openpyxl, "DEFUSEDXML", False)
    assert "refusing to open .xlsx files without the defusedxml package" in messages(
        make_study(folder, ratings="r.xlsx")
    )


def test_unknown_separator_is_explained(make_study) -> None:
    msg = messages(make_study(ratings_text=long_csv(ROWS, sep="|")))
    assert (
        "ratings.csv:1: error: no header line" in msg
        and "separated by commas, semicolons or tabs" in msg
    )
