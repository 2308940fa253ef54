"""Regression tests for defects found in a hands-on audit of the intake and `check`/`init`.

Each test names the defect it guards against.  The studies are small invented ones made by the
shared ``make_study`` fixture (ordinal P/S/X, raters R1–R3, two trials).
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from conftest import default_ratings, default_reference

from reportgen.design import design_warnings
from reportgen.errors import InputError
from reportgen.ratings import load_ratings
from reportgen.study import load_study


def _warnings(path: Path) -> list[dict[str, str]]:
    study = load_study(path)
    return design_warnings(study, load_ratings(study))


# -- a label typed instead of its category code ----------------------------------------------


def test_a_label_instead_of_a_code_is_refused_with_the_code_named(make_study) -> None:
    """Defect: 'Scrap' (the label of X) was refused with only the list of codes."""
    rows = default_ratings(
        default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    rows[0] = (*rows[0][:3], "Scrap")
    rows[1] = (*rows[1][:3], "standard")
    study = load_study(make_study(ratings_rows=rows))
    with pytest.raises(InputError) as exc:
        load_ratings(study)
    problems = exc.value.problems()
    assert [(p.location.line, p.message) for p in problems] == [
        (2, "unknown category 'Scrap'"),
        (3, "unknown category 'standard'"),
    ]
    assert (
        problems[0].hint
        == "'Scrap' is the label of category 'X': write the code. declared codes: P, S, X"
    )
    assert problems[1].hint.startswith("'standard' is the label of category 'S'")


def test_a_near_code_still_gets_did_you_mean(make_study) -> None:
    rows = default_ratings(
        default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    rows[0] = (*rows[0][:3], "p")
    with pytest.raises(InputError) as exc:
        load_ratings(load_study(make_study(ratings_rows=rows)))
    assert exc.value.problems()[0].hint == "did you mean 'P'? declared codes: P, S, X"


# -- the plan's item list as reference file ---------------------------------------------------


def test_item_list_with_borderline_column_serves_as_reference(make_study) -> None:
    """Defect: `reference: items.csv` (item,reference,borderline) was refused for its
    borderline column, although the item list is where the references already are."""
    ref = default_reference(30, ["P", "S", "X"])
    text = "item,reference,borderline\n" + "".join(
        f"{i},{c},{'yes' if n % 4 == 0 else 'no'}\n" for n, (i, c) in enumerate(ref)
    )
    study = load_study(make_study(reference="items.csv", reference_text=text))
    ratings = load_ratings(study)
    assert ratings.reference is not None
    assert [ratings.categories[k] for k in ratings.reference[:4]] == ["P", "S", "X", "P"]
    assert any("column 'borderline' ignored" in n for n in ratings.notes)


def test_a_misspelt_reference_file_column_is_still_refused(make_study) -> None:
    ref = default_reference(30, ["P", "S", "X"])
    text = "item,reference,refrence\n" + "".join(f"{i},{c},{c}\n" for i, c in ref)
    with pytest.raises(InputError) as exc:
        load_ratings(load_study(make_study(reference_text=text)))
    p = exc.value.problems()[0]
    assert p.message == "unknown column 'refrence' in the reference file" and p.location.line == 1


# -- design warnings --------------------------------------------------------------------------


def test_single_item_warning_is_singular(make_study) -> None:
    """Defect: 'only 1 items'."""
    w = _warnings(make_study(n_items=1))
    assert w[0]["kind"] == "few-items"
    assert w[0]["message"].startswith("only 1 item; at least 30")


def test_a_rater_without_any_rating_is_a_warning(make_study) -> None:
    """Defect: with `missing: allow`, a rater with no rating at all passed `check --strict`."""
    rows = [
        r
        for r in default_ratings(
            default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
        )
        if r[1] != "R3"
    ]
    w = _warnings(make_study(ratings_rows=rows, missing="allow"))
    assert [x["kind"] for x in w] == ["rater-without-ratings"]
    assert w[0]["message"].startswith("rater R3 gave no rating at all")


def test_a_trial_without_any_rating_is_a_warning(make_study) -> None:
    rows = [
        r
        for r in default_ratings(
            default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 3, ["P", "S", "X"]
        )
        if r[2] != 3
    ]
    w = _warnings(make_study(ratings_rows=rows, trials=3, missing="allow"))
    assert [x["kind"] for x in w] == ["trial-without-ratings"]
    assert w[0]["message"].startswith("trial 3 holds no rating at all")


def test_a_single_rater_is_a_warning_and_strict_fails(make_study, run_cli) -> None:
    """Defect: a one-rater study (no reproducibility at all) gave no warning."""
    path = make_study(raters=[{"id": "R1", "name": "Rater 1"}])
    assert [x["kind"] for x in _warnings(path)] == ["single-rater"]
    code, out, _ = run_cli("check", path, "--strict", "--json")
    assert code == 4
    assert json.loads(out)["warnings"][0]["message"].startswith("only 1 rater: reproducibility")


# -- init into an impossible place ------------------------------------------------------------


def test_init_under_a_file_is_bad_usage_not_an_internal_error(run_cli, tmp_path: Path) -> None:
    """Defect: `reportgen init some-file/x` ended with exit 70 'internal error'."""
    blocker = tmp_path / "notes.txt"
    blocker.write_text("keep me\n")
    code, _, err = run_cli("init", blocker / "study")
    assert code == 2
    assert "cannot write the study here" in err and "notes.txt is a file, not a folder" in err
    assert blocker.read_text() == "keep me\n"


def test_lost_leading_zeros_are_named_in_the_hint(make_study) -> None:
    """Found with an .xlsx whose item column Excel had turned into numbers: the reference's
    '007' met the ratings' '7'; the message now says what probably happened."""
    ref = [(f"{i:03d}", c) for i, c in zip(range(1, 31), ["P", "S", "X"] * 10, strict=True)]
    rows = default_ratings(
        [(str(int(i)), c) for i, c in ref], ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    with pytest.raises(InputError) as exc:
        load_ratings(load_study(make_study(ratings_rows=rows, reference_rows=ref)))
    first = exc.value.problems()[0]
    assert (first.location.line, first.message) == (
        2,
        "reference given for item '001', which has no ratings",
    )
    assert (
        first.hint
        == "the ratings have item '1': were leading zeros lost in a spreadsheet? keep item ids as text"
    )


def test_an_unclosed_quote_names_the_line_where_it_opens(make_study) -> None:
    """Defect: a stray quote in a comment column was reported at the last line of the file."""
    rows = default_ratings(
        default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    lines = ["item,rater,trial,rating,comment"] + [f"{i},{r},{t},{c}," for i, r, t, c in rows]
    lines[7] += '"edge chipped'  # line 8 of the file
    with pytest.raises(InputError) as exc:
        load_ratings(load_study(make_study(ratings_text="\n".join(lines) + "\n")))
    [p] = exc.value.problems()
    assert p.location.line == 8
    assert p.message.startswith("a quoted field starts on this line and is never closed")


def test_trial_written_as_a_whole_float_is_that_trial(make_study) -> None:
    """Found with a CSV written from a spreadsheet column of numbers: trial '1.0' was refused."""
    rows = default_ratings(
        default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    text = "item,rater,trial,rating\n" + "".join(f"{i},{r},{t}.0,{c}\n" for i, r, t, c in rows)
    plain = load_ratings(load_study(make_study(ratings_rows=rows)))
    floats = load_ratings(
        load_study(make_study(Path(make_study()).parent.parent / "f", ratings_text=text))
    )
    assert (floats.codes == plain.codes).all()


def test_a_row_that_cannot_be_placed_is_not_also_reported_as_absent_ratings(make_study) -> None:
    """Defect: one bad trial cell ('x') gave its own error plus 'no rating for item … trial 1'
    for the cell that row stood for; a bad trial column gave one error per rater and trial on top."""
    rows = default_ratings(
        default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    lines = [f"{i},{r},{t},{c}" for i, r, t, c in rows]
    lines[2] = lines[2].replace(",1,", ",x,")  # item I03, R1: trial unreadable
    lines[4] = lines[4].replace(",R1,", ",R7,")  # undeclared rater
    del lines[9]  # item I10, R1, trial 1: really absent
    with pytest.raises(InputError) as exc:
        load_ratings(
            load_study(
                make_study(ratings_text="item,rater,trial,rating\n" + "\n".join(lines) + "\n")
            )
        )
    got = [(p.location.line, p.message) for p in exc.value.problems()]
    assert got == [
        (4, "trial must be a whole number from 1 to 2, got 'x'"),
        (6, "undeclared rater 'R7'"),
        (None, "no rating for item 'I10' by rater R1 in trial 1"),
    ]


@pytest.mark.parametrize(
    ("name", "data", "message"),
    [
        (
            "ratings.csv",
            b"item,rater,trial,rating\n",
            "the study definition must be a mapping of keys, got str",
        ),
        (
            "ratings.xlsx",
            b"PK\x03\x04rest-of-a-zip",
            "this is a workbook or other binary file, not a study definition",
        ),
        ("report.pdf", b"%PDF-1.7\n", "this is a PDF, not a study definition"),
    ],
)
def test_giving_another_file_as_the_study_says_so(
    run_cli, tmp_path: Path, name: str, data: bytes, message: str
) -> None:
    """Defect: `check ratings.xlsx` said 'not UTF-8 text … save the study definition as UTF-8'."""
    path = tmp_path / name
    path.write_bytes(data)
    code, _, err = run_cli("check", path)
    assert code == 2 and message in err
    assert "give the study definition" in err


def test_an_overlong_study_id_is_refused_before_any_work(make_study, run_cli) -> None:
    """Defect: a 250-character id passed `check`; `build` then computed everything and ended with
    exit 70 ('File name too long'), leaving an empty folder behind."""
    path = make_study(study={"id": "L" * 250})
    code, _, err = run_cli("check", path)
    assert code == 2 and "study.id: the id has 250 characters; at most 100 are allowed" in err
    out = Path(path).parent / "out"
    assert run_cli("build", path, "-o", out, "--no-pdf", "-q")[0] == 2 and not out.exists()
    assert (
        load_study(make_study(Path(path).parent.parent / "ok", study={"id": "L" * 100})).id
        == "L" * 100
    )


def test_init_keeps_a_long_folder_name_within_the_id_limit(run_cli, tmp_path: Path) -> None:
    folder = tmp_path / ("door-finish-" + "x" * 150)
    code, _, err = run_cli("init", folder, "--items", "3")
    assert code == 0, err
    assert load_study(folder / "study.yaml").id == ("door-finish-" + "x" * 150)[:100]
    code, _, err = run_cli("init", tmp_path / "b", "--id", "Y" * 101)
    assert code == 2 and "at most 100 characters" in err


def test_formula_cells_without_saved_values_are_named(make_study) -> None:
    """Found with a workbook written by a script: a formula never computed by a spreadsheet
    program has no saved value and was refused as a 'blank rating cell'."""
    import io

    import openpyxl

    rows = default_ratings(
        default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
    )
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(["item", "rater", "trial", "rating"])
    for k, (i, r, t, c) in enumerate(rows):
        ws.append([i, r, t, '=IF(1,"P","S")' if k in (0, 4) else c])
    buf = io.BytesIO()
    wb.save(buf)
    study = load_study(make_study(ratings="ratings.xlsx", files={"ratings.xlsx": buf.getvalue()}))
    with pytest.raises(InputError) as exc:
        load_ratings(study)
    [p] = exc.value.problems()
    assert p.message == "formula cells with no saved value (read as blank): D2, D6"
