"""The inspector register: latest outcome per inspector and characteristic, status on an injected day."""

from __future__ import annotations

import csv
import datetime as dt
import io
from pathlib import Path

import pytest
from _revisions import make_revision
from click.testing import CliRunner

from reportgen.archive import archive_revision, list_entries
from reportgen.cli import cli
from reportgen.errors import CheckFailed, InputError
from reportgen.register import build_register, format_table, status_on, to_csv, to_html

D = dt.date.fromisoformat


@pytest.mark.parametrize(
    ("until", "as_of", "window", "expected"),
    [
        ("2027-01-31", "2026-12-31", 30, ("valid", 31)),  # 31 days left: outside a 30-day window
        ("2027-01-31", "2026-12-30", 30, ("valid", 32)),
        ("2027-01-31", "2027-01-01", 30, ("due", 30)),  # exactly the window: due
        ("2027-01-31", "2027-01-31", 30, ("due", 0)),  # last valid day
        ("2027-01-31", "2027-02-01", 30, ("expired", -1)),
        ("2027-01-31", "2027-01-01", 0, ("valid", 30)),
    ],
)
def test_status_boundaries(until: str, as_of: str, window: int, expected: tuple[str, int]) -> None:
    assert (
        status_on(outcome="certified", valid_until=until, as_of=D(as_of), due_within=window)
        == expected
    )


def test_not_certified_has_no_end() -> None:
    assert status_on(
        outcome="not certified", valid_until=None, as_of=D("2026-01-01"), due_within=30
    ) == (
        "not certified",
        None,
    )
    assert (
        status_on(outcome="certified", valid_until=None, as_of=D("2026-01-01"), due_within=30)[0]
        == "not certified"
    )


@pytest.fixture()
def two_revisions(tmp_path: Path) -> Path:
    out, root = tmp_path / "output", tmp_path / "archive"
    archive_revision(make_revision(out, "SEAL-CHECK", 1, date="2026-01-15"), archive_dir=root)
    archive_revision(
        make_revision(
            out,
            "SEAL-CHECK",
            2,
            date="2027-01-10",
            raters={"I1": "Ana Ruiz", "I2": "Ben Okafor", "I3": "Chen Wei"},
            certified={"I1": True, "I2": False, "I3": True},
        ),
        archive_dir=root,
    )
    return root


def test_status_changes_as_the_clock_passes_valid_until(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output", date="2026-01-15"), archive_dir=root)
    entries = list_entries(root)

    def statuses(day: str) -> list[tuple[str, str, str | None, int | None]]:
        reg = build_register(entries, as_of=D(day))
        return [(ln.inspector, ln.status, ln.valid_until, ln.days_left) for ln in reg.lines]

    # certified on 2026-01-15 for 12 months: valid until the end of January 2027
    assert statuses("2026-06-01") == [
        ("Ana Ruiz", "valid", "2027-01-31", 244),
        ("Ben Okafor", "valid", "2027-01-31", 244),
    ]
    assert statuses("2027-01-01") == [
        ("Ana Ruiz", "due", "2027-01-31", 30),
        ("Ben Okafor", "due", "2027-01-31", 30),
    ]
    assert statuses("2027-02-01") == [
        ("Ana Ruiz", "expired", "2027-01-31", -1),
        ("Ben Okafor", "expired", "2027-01-31", -1),
    ]
    assert [
        ln.status for ln in build_register(entries, as_of=D("2026-12-20"), due_within=60).lines
    ] == ["due", "due"]


def test_latest_study_decides(two_revisions: Path) -> None:
    reg = build_register(list_entries(two_revisions), as_of=D("2027-02-15"))
    got = {
        ln.inspector: (ln.outcome, ln.certified_on, ln.valid_until, ln.status, ln.revision)
        for ln in reg.lines
    }
    assert got == {
        "Ana Ruiz": ("certified", "2027-01-10", "2028-01-31", "valid", 2),
        # failed the requalification: the earlier certification no longer counts
        "Ben Okafor": ("not certified", None, None, "not certified", 2),
        "Chen Wei": ("certified", "2027-01-10", "2028-01-31", "valid", 2),
    }
    assert reg.counts() == {
        "valid": 2,
        "due": 0,
        "expired": 0,
        "not certified": 1,
        "not yet certified": 0,
    }
    table = format_table(reg)
    assert (
        "Ben Okafor" in table
        and "not certified" in table
        and "2 valid, 0 due, 0 expired, 1 not certified" in table
    )
    rows = list(csv.DictReader(io.StringIO(to_csv(reg))))
    assert [r["status"] for r in rows] == ["valid", "not certified", "valid"]
    assert rows[0]["valid_until"] == "2028-01-31" and rows[1]["days_left"] == ""


def test_characteristics_are_kept_apart_and_lines_are_rater_id_and_study(tmp_path: Path) -> None:
    """A line is one rater id in one study: names are shown as given and never merged (two
    people may share a name; issue 13)."""
    out, root = tmp_path / "output", tmp_path / "archive"
    archive_revision(make_revision(out, "SEAL-CHECK", 1, date="2026-01-15"), archive_dir=root)
    archive_revision(
        make_revision(
            out,
            "CRIMP-CHECK",
            1,
            date="2026-05-02",
            characteristic="Crimp height",
            raters={"X9": "Ana  Ruiz"},
            certified={"X9": False},
        ),
        archive_dir=root,
    )
    archive_revision(
        make_revision(
            out,
            "SEAL-RECHECK",
            1,
            date="2026-09-01",
            raters={"Q1": "ana ruiz"},
            certified={"Q1": True},
        ),
        archive_dir=root,
    )
    reg = build_register(list_entries(root), as_of=D("2026-10-01"))
    got = sorted(
        (ln.inspector.casefold(), ln.characteristic, ln.status, ln.study_id) for ln in reg.lines
    )
    assert got == [
        ("ana  ruiz", "Crimp height", "not certified", "CRIMP-CHECK"),
        ("ana ruiz", "Seal seating", "valid", "SEAL-CHECK"),
        ("ana ruiz", "Seal seating", "valid", "SEAL-RECHECK"),
        ("ben okafor", "Seal seating", "valid", "SEAL-CHECK"),
    ]


def test_cli_fail_on_and_outputs(two_revisions: Path, tmp_path: Path) -> None:
    runner = CliRunner()
    base = ["register", "--archive", str(two_revisions)]
    r = runner.invoke(cli, [*base, "--as-of", "2027-03-01", "--fail-on", "expired"])
    assert r.exit_code == 0, r.output
    assert "Ana Ruiz" in r.output and "valid" in r.output

    r = runner.invoke(cli, [*base, "--as-of", "2028-01-10", "--fail-on", "expired"])
    assert r.exit_code == 0  # due, not expired
    r = runner.invoke(cli, [*base, "--as-of", "2028-01-10", "--fail-on", "due"])
    assert isinstance(r.exception, CheckFailed)
    assert str(r.exception) == (
        "2 certification(s) due or expired: Ana Ruiz (Seal seating): due; Chen Wei (Seal seating): due"
    )
    r = runner.invoke(cli, [*base, "--as-of", "2028-02-01", "--fail-on", "expired", "--quiet"])
    assert isinstance(r.exception, CheckFailed) and r.output == ""
    assert "expired: Ana Ruiz (Seal seating): expired" in str(r.exception)

    csv_file, html_file = tmp_path / "reg" / "register.csv", tmp_path / "register.html"
    r = runner.invoke(
        cli, [*base, "--as-of", "2027-03-01", "--csv", str(csv_file), "--html", str(html_file)]
    )
    assert r.exit_code == 0, r.output
    assert (
        csv_file.read_text().splitlines()[0].startswith("inspector,characteristic,station,outcome")
    )
    html = html_file.read_text()
    assert (
        "Status on 2027-03-01" in html
        and html.count('class="s-valid"') == 2
        and html.count('class="s-not-certified"') == 1
    )

    r = runner.invoke(cli, [*base, "--as-of", "March 1"])
    assert r.exit_code == 2 and "YYYY-MM-DD" in r.output
    r = runner.invoke(
        cli, ["register", "--archive", str(tmp_path / "none"), "--as-of", "2027-03-01"]
    )
    assert isinstance(r.exception, InputError) and "no archive here" in str(r.exception)


def test_cli_exit_codes_through_main(
    two_revisions: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    from reportgen.cli import main

    with pytest.raises(SystemExit) as exc:
        main(
            [
                "register",
                "--archive",
                str(two_revisions),
                "--as-of",
                "2028-02-01",
                "--fail-on",
                "expired",
                "-q",
            ]
        )
    assert exc.value.code == 1
    with pytest.raises(SystemExit) as exc:
        main(["register", "--archive", str(two_revisions.parent / "nowhere")])
    assert exc.value.code == 2
    assert "no archive here" in capsys.readouterr().err


def test_html_escapes_names(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(
        make_revision(tmp_path / "output", raters={"I1": "<script>x</script>"}), archive_dir=root
    )
    html = to_html(build_register(list_entries(root), as_of=D("2026-02-01")))
    assert "<script>x" not in html and "&lt;script&gt;x&lt;/script&gt;" in html


@pytest.mark.slow
@pytest.mark.render
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_two_built_revisions_history_register_and_verify(
    tmp_path_factory: pytest.TempPathFactory, tmp_path: Path
) -> None:
    """Real builds of an invented study: archive rev1 and rev2, then history, register and verify."""
    from _built import built_report

    from reportgen.history import load_history
    from reportgen.verify import verify_report

    root = tmp_path / "archive"
    rev1 = built_report(tmp_path_factory, "a").parent
    rev2 = built_report(tmp_path_factory, "c").parent
    e1 = archive_revision(rev1, archive_dir=root)
    assert (e1.study_id, e1.revision, e1.study_date, e1.characteristic, e1.station) == (
        "LUG-CHECK",
        1,
        "2026-11-16",
        "Lug crimp",
        "Harness cell 1",
    )
    # the figures kept are the built ones, with their intervals
    built = __import__("json").loads((rev1 / "results.json").read_text())
    assert (
        e1.figures["panel"]["reproducibility.fleiss_kappa"]["ci_low"]
        == built["reproducibility"]["fleiss_kappa"]["ci_low"]
    )
    assert e1.verdict == built["verdict"]["outcome"]

    def register_on(day: str) -> dict[str, tuple[str, str | None]]:
        reg = build_register(list_entries(root), as_of=D(day))
        return {ln.inspector: (ln.status, ln.valid_until) for ln in reg.lines}

    # certified on 2026-11-16 for 12 months: valid until 2027-11-30; 30 days' due window
    assert register_on("2027-10-01") == {
        n: ("valid", "2027-11-30") for n in ("Marta Quist", "Oren Falk", "Priya Nand")
    }
    assert register_on("2027-11-15") == {
        n: ("due", "2027-11-30") for n in ("Marta Quist", "Oren Falk", "Priya Nand")
    }
    assert register_on("2027-12-01") == {
        n: ("expired", "2027-11-30") for n in ("Marta Quist", "Oren Falk", "Priya Nand")
    }

    archive_revision(rev2, archive_dir=root)  # requalified on 2027-11-10; Priya Nand falls short
    assert register_on("2027-12-01") == {
        "Marta Quist": ("valid", "2028-11-30"),
        "Oren Falk": ("valid", "2028-11-30"),
        "Priya Nand": ("not certified", None),
    }
    runner = CliRunner()
    r = runner.invoke(
        cli, ["register", "--archive", str(root), "--as-of", "2028-12-01", "--fail-on", "expired"]
    )
    assert isinstance(r.exception, CheckFailed)
    assert str(r.exception) == (
        "2 certification(s) expired: Marta Quist (Lug crimp): expired; Oren Falk (Lug crimp): expired"
    )

    entries, [series] = load_history(root)
    assert [p.label for p in series.points] == ["LUG-CHECK rev1", "LUG-CHECK rev2"]
    assert [p.superseded_by for p in series.points] == [2, None]
    assert not any(p.item_set_changed for p in series.points)  # the same 12 lugs
    assert [r["estimate"] for r in series.inspector("Priya Nand", "accuracy.effectiveness")] == [
        22 / 24,
        21 / 24,
    ]

    # the archived copy is still a genuine report
    assert verify_report(root / "LUG-CHECK" / "rev2" / "LUG-CHECK-rev2.pdf").ok
