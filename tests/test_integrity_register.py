"""The register is right on any date, keyed by rater id and study, names as given (issue 13, attack 6).

Archived rounds are made with ``make_revision`` (invented figures); each date below is checked
before, at, between and after the rounds.  Valid-until is the end of the month 12 months after
certification (the verdict's rule, see tests/test_register.py).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from pathlib import Path

import pytest
from _revisions import make_revision
from click.testing import CliRunner

from reportgen.archive import archive_revision, list_entries
from reportgen.register import build_register, format_table, safe_cell, to_csv, to_html

D = dt.date.fromisoformat


def _status(root: Path, day: str) -> dict[str, tuple[str, str | None, int]]:
    reg = build_register(list_entries(root), as_of=D(day))
    return {
        f"{ln.rater_id}/{ln.study_id}": (ln.status, ln.certified_on, ln.revision)
        for ln in reg.lines
    }


@pytest.fixture()
def two_rounds(tmp_path: Path) -> Path:
    """2026-03-10 IMPROVE (nobody certified), 2026-04-14 both certified (the issue's example)."""
    out, root = tmp_path / "output", tmp_path / "archive"
    archive_revision(
        make_revision(
            out,
            "SEAL-CHECK",
            1,
            date="2026-03-10",
            verdict="IMPROVE",
            certified={"I1": False, "I2": False},
        ),
        archive_dir=root,
    )
    archive_revision(make_revision(out, "SEAL-CHECK", 2, date="2026-04-14"), archive_dir=root)
    return root


@pytest.mark.parametrize(
    ("day", "expected"),
    [
        ("2026-01-01", ("not yet certified", None, 1)),  # before: was "valid" twice (issue)
        ("2026-03-09", ("not yet certified", None, 1)),
        ("2026-03-10", ("not certified", None, 1)),  # at the first round
        ("2026-03-20", ("not certified", None, 1)),  # between: was "certified 2026-04-14 … valid"
        ("2026-04-13", ("not certified", None, 1)),
        ("2026-04-14", ("valid", "2026-04-14", 2)),  # at the second round
        ("2026-06-01", ("valid", "2026-04-14", 2)),  # after
        ("2027-04-30", ("due", "2026-04-14", 2)),
        ("2027-05-01", ("expired", "2026-04-14", 2)),
    ],
)
def test_two_rounds_on_every_date(two_rounds: Path, day: str, expected: tuple) -> None:
    got = _status(two_rounds, day)
    assert got == {"I1/SEAL-CHECK": expected, "I2/SEAL-CHECK": expected}


def test_two_rounds_csv_and_html_agree_before_any_study(two_rounds: Path, tmp_path: Path) -> None:
    reg = build_register(list_entries(two_rounds), as_of=D("2026-01-01"))
    rows = list(csv.DictReader(io.StringIO(to_csv(reg))))
    assert [(r["inspector"], r["status"], r["certified_on"], r["valid_until"]) for r in rows] == [
        ("Ana Ruiz", "not yet certified", "", ""),
        ("Ben Okafor", "not yet certified", "", ""),
    ]
    html = to_html(reg)
    assert (
        html.count('class="s-not-yet-certified"') == 2 and "valid" not in html.split("<tbody>")[1]
    )
    assert "0 valid, 0 due, 0 expired, 0 not certified, 2 not yet certified" in format_table(reg)


@pytest.fixture()
def three_rounds(tmp_path: Path) -> Path:
    """2026-01-15 certified; 2026-06-10 the requalification fails; 2026-09-01 certified again."""
    out, root = tmp_path / "output", tmp_path / "archive"
    raters = {"I1": "Ana Ruiz"}
    for rev, (date, ok) in enumerate(
        (("2026-01-15", True), ("2026-06-10", False), ("2026-09-01", True)), start=1
    ):
        archive_revision(
            make_revision(out, "SEAL-CHECK", rev, date=date, raters=raters, certified={"I1": ok}),
            archive_dir=root,
        )
    return root


@pytest.mark.parametrize(
    ("day", "expected"),
    [
        ("2026-01-14", ("not yet certified", None, 1)),  # before
        ("2026-01-15", ("valid", "2026-01-15", 1)),  # at round 1
        ("2026-03-01", ("valid", "2026-01-15", 1)),  # between 1 and 2
        ("2026-06-10", ("not certified", None, 2)),  # at round 2: the failure ends it
        ("2026-07-01", ("not certified", None, 2)),  # between 2 and 3
        ("2026-09-01", ("valid", "2026-09-01", 3)),  # at round 3
        ("2027-08-31", ("due", "2026-09-01", 3)),
        ("2027-10-01", ("expired", "2026-09-01", 3)),  # after
    ],
)
def test_three_rounds_on_every_date(three_rounds: Path, day: str, expected: tuple) -> None:
    assert _status(three_rounds, day) == {"I1/SEAL-CHECK": expected}


def test_two_raters_sharing_a_name_stay_two_rows(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(
        make_revision(
            tmp_path / "output",
            raters={"I1": "Sam Lee", "I2": "Sam Lee"},
            certified={"I1": True, "I2": False},
        ),
        archive_dir=root,
    )
    reg = build_register(list_entries(root), as_of=D("2026-06-01"))
    assert [(ln.inspector, ln.rater_id, ln.status) for ln in reg.lines] == [
        ("Sam Lee", "I1", "valid"),
        ("Sam Lee", "I2", "not certified"),  # before: collapsed into one certified row
    ]
    assert (
        "note: Sam Lee (Seal seating): rater ids I1 in SEAL-CHECK, I2 in SEAL-CHECK share this "
        "name; they are kept as different people"
    ) in format_table(reg)


def test_check_warns_about_a_shared_name(make_study) -> None:  # type: ignore[no-untyped-def]
    from reportgen.commands.check import run_check

    study = make_study(raters=[{"id": "A", "name": "Sam Lee"}, {"id": "B", "name": "sam  lee"}])
    warnings = [w for w in run_check(study)["warnings"] if w["kind"] == "shared-name"]
    assert warnings == [
        {
            "kind": "shared-name",
            "message": "raters A, B share the name 'Sam Lee'; the register keeps them as different "
            "people (by rater id) — give each a distinguishing name if they are",
        }
    ]


def test_name_with_a_combining_mark_is_the_same_inspector(tmp_path: Path) -> None:
    """A failed requalification entered with a combining diaeresis supersedes the certificate."""
    out, root = tmp_path / "output", tmp_path / "archive"
    archive_revision(
        make_revision(out, "SEAL-CHECK", 1, date="2026-01-15", raters={"I1": "Zo\u00eb Lind"}),
        archive_dir=root,
    )
    archive_revision(
        make_revision(
            out,
            "SEAL-CHECK",
            2,
            date="2026-05-01",
            raters={"I1": "Zoe\u0308 Lind"},
            certified={"I1": False},
        ),
        archive_dir=root,
    )
    [line] = build_register(list_entries(root), as_of=D("2026-06-01")).lines
    assert (line.inspector, line.status, line.revision) == ("Zo\u00eb Lind", "not certified", 2)


def test_csv_cells_that_a_spreadsheet_would_run_are_written_safely(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    names = {"I1": "=HYPERLINK(1)", "I2": "+SUM(1)", "I3": "-2+3", "I4": "@cmd"}
    archive_revision(make_revision(tmp_path / "output", raters=names), archive_dir=root)
    reg = build_register(list_entries(root), as_of=D("2027-03-01"))
    rows = list(csv.DictReader(io.StringIO(to_csv(reg))))
    assert sorted(r["inspector"] for r in rows) == ["'+SUM(1)", "'-2+3", "'=HYPERLINK(1)", "'@cmd"]
    assert {r["days_left"] for r in rows} == {"-29"}  # numbers stay numbers
    assert safe_cell("Ana") == "Ana" and safe_cell(-3) == -3


def test_cli_as_of_before_any_study(two_rounds: Path) -> None:
    from reportgen.commands.register import command

    r = CliRunner().invoke(command, ["--archive", str(two_rounds), "--as-of", "2026-01-01"])
    assert r.exit_code == 0, r.output
    assert "not yet certified" in r.output and " valid " not in r.output


def test_json_rows_keep_names_exactly(tmp_path: Path) -> None:
    import json

    from reportgen.commands.register import command

    root = tmp_path / "archive"
    archive_revision(
        make_revision(tmp_path / "output", raters={"I1": "=HYPERLINK(1)"}), archive_dir=root
    )
    r = CliRunner().invoke(command, ["--archive", str(root), "--as-of", "2026-06-01", "--json"])
    assert r.exit_code == 0, r.output
    assert [row["inspector"] for row in json.loads(r.output)["rows"]] == ["=HYPERLINK(1)"]
