"""What the commands print: the terminal summary, check's rules line, quiet modes, progress in
logs, init --plan, and the software version the archive records (issue: one command line)."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest

from tests import _built

ROOT = Path(__file__).resolve().parent.parent
STUDIES = ROOT / "studies"


@pytest.fixture
def lug(tmp_path: Path) -> Path:
    return _built.study_files(tmp_path / "lug")


def _summary(study: Path, width: int) -> str:
    from reportgen.analysis import analyse
    from reportgen.commands.stats import format_summary
    from reportgen.ratings import load_ratings
    from reportgen.study import load_study
    from reportgen.verdict import judge

    s = load_study(study)
    results = analyse(s, load_ratings(s))
    results.update(judge(s, results))
    return format_summary(results, width)


@pytest.mark.parametrize("width", [60, 80, 100])
def test_summary_fits_the_width_and_never_prints_none(width: int) -> None:
    for name in ("seal-check", "finish-grading", "defect-triage"):
        text = _summary(STUDIES / name / "study.yaml", width)
        long = [line for line in text.splitlines() if len(line) > width]
        assert long == [], f"{name} at {width}: {long[:2]}"
        assert not re.search(r"\bNone\b", text), name


def test_summary_names_the_rater_in_every_rule_and_certification_line() -> None:
    text = _summary(STUDIES / "seal-check" / "study.yaml", 200)
    verdict = text.split("\nVerdict\n", 1)[1].split("\n\n", 1)[0]
    rule_lines = [ln for ln in verdict.splitlines() if "judged against" in ln]
    assert len(rule_lines) == 9  # 3 rules x 3 inspectors (studies/seal-check/study.yaml)
    for ln in rule_lines:
        assert re.search(r"INS-[ABC] \((Lena Brauer|Kofi Mensah|Yuki Harada)\)", ln), ln
    # the three effectiveness lines differ now (before: three identical lines)
    eff = [ln for ln in rule_lines if "effectiveness" in ln]
    assert len(set(eff)) == 3
    cert = text.split("\nInspector certification\n", 1)[1].split("\n\n", 1)[0]
    # issue 12: INS-A's miss rate is short of the study's 2 % criterion, so INS-A is not certified
    assert cert.splitlines()[0].startswith("  INS-A (Lena Brauer): not certified")


def test_stats_reads_columns(run_cli, lug: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("COLUMNS", "64")
    code, out, _ = run_cli("stats", lug.parent, "-q")  # STUDY as its folder
    assert code == 0 and out == ""
    code, out, _ = run_cli("stats", lug.parent)
    assert code == 0 and max(len(x) for x in out.splitlines()) <= 64


def test_check_sums_up_criteria_and_certification(run_cli, lug: Path) -> None:
    code, out, _ = run_cli("check", lug)
    assert code == 0
    assert (
        "criteria: 1 rule from Harness cell work instruction HC-WI-3 (invented for the tests); "
        "certification: 1 rule, valid 12 months"
    ) in out
    code, out, err = run_cli("check", lug, "-q")  # only problems: the warnings, on stderr
    assert code == 0 and out == ""
    assert err.splitlines() == [
        "warning: only 12 items; at least 30 is common practice, and intervals will be wide"
    ]
    code, out, _ = run_cli("check", lug, "--json")
    assert json.loads(out)["rules"].startswith("criteria: 1 rule")


def test_check_without_criteria_says_so(run_cli, tmp_path: Path) -> None:
    study = _built.study_files(tmp_path / "plain")
    text = study.read_text(encoding="utf-8")
    study.write_text(text.split("criteria:")[0], encoding="utf-8")
    code, out, _ = run_cli("check", study)
    assert code == 0
    assert "criteria: none (the report gives no verdict); certification: none" in out


def test_init_plan_writes_the_item_list_and_says_the_next_command(run_cli, tmp_path: Path) -> None:
    folder = tmp_path / "spatter"
    code, out, _ = run_cli("init", folder, "--plan", "--item-count", "4", "--scale", "binary")
    assert code == 0
    assert (folder / "items.csv").read_text() == (
        "item,reference,borderline\n001,,\n002,,\n003,,\n004,,\n"
    )
    assert not (folder / "ratings.csv").exists() and not (folder / "reference.csv").exists()
    assert f"reportgen plan {folder} --items {folder / 'items.csv'}" in out
    text = (folder / "study.yaml").read_text()
    assert "ratings: plan/ratings-entry.csv" in text and "key: plan/key/key.csv" in text
    assert "--round next" in text  # a repeated study is a new round, not a revision
    # fill in the references: plan then writes into the study folder itself
    (folder / "items.csv").write_text(
        "item,reference,borderline\n001,OK,no\n002,NC,yes\n003,OK,no\n004,NC,no\n"
    )
    code, out, err = run_cli("plan", folder, "--items", folder / "items.csv", "--no-pdf", "-q")
    assert code == 0, err
    assert (folder / "plan" / "key" / "key.csv").is_file()
    assert (folder / "plan" / "ratings-entry.csv").is_file()
    code, _, err = run_cli("init", folder, "--plan")
    assert code == 5 and "never overwrites" in err


def test_init_old_items_spelling_still_counts(run_cli, tmp_path: Path) -> None:
    code, _, _ = run_cli("init", tmp_path / "s", "--items", "3")
    assert code == 0
    assert len((tmp_path / "s" / "reference.csv").read_text().splitlines()) == 4


def test_archive_folder_that_is_no_archive_is_refused(run_cli, tmp_path: Path) -> None:
    other = tmp_path / "papers"
    other.mkdir()
    (other / "notes.txt").write_text("x")
    for args in (("history",), ("register",), ("archive", tmp_path / "x" / "rev1")):
        code, _, err = run_cli(*args, "--archive", other)
        assert code == 2, args
        assert f"{other}: error: not an archive" in err, args


@pytest.mark.render
def test_build_logs_stages_with_seconds_and_archive_records_the_version(
    run_cli, lug: Path, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    from reportgen import __version__

    monkeypatch.setenv("CI", "true")  # not a terminal: one line per stage with seconds
    out_dir, arch = tmp_path / "out", tmp_path / "arch"
    code, out, err = run_cli(
        "build", lug, "-o", out_dir, "--generated-at", "2026-11-20T09:00:00Z", "--archive", arch
    )
    assert code == 0, err
    stages = re.findall(r"^\[ *(\d+\.\d) s\] (.+)$", err, flags=re.M)
    names = [s for _, s in stages]
    for stage in ("reading the study", "reading ratings", "charts", "PDF", "writing", "archiving"):
        assert stage in names, (stage, names)
    seconds = [float(t) for t, _ in stages]
    assert seconds == sorted(seconds)
    row = json.loads((arch / "LUG-CHECK" / "rev1" / "archive-entry.json").read_text())
    assert row["software_version"] == __version__
    # quiet: nothing at all
    code, out, err = run_cli("verify", out_dir / "LUG-CHECK" / "rev1" / "LUG-CHECK-rev1.pdf", "-q")
    assert code == 0 and out == "" and err == ""


@pytest.mark.render
def test_verify_quiet_prints_only_the_failed_checks(run_cli, lug: Path, tmp_path: Path) -> None:
    folder = _built.build(lug, tmp_path / "out")
    pdf = folder / "LUG-CHECK-rev1.pdf"
    bad = tmp_path / "bad.pdf"
    results = json.loads((folder / "results.json").read_text())
    results["study"]["title"] = "changed after the build"
    attached = _built.attachments_of(pdf)
    attached["results.json"] = json.dumps(results).encode()
    _built.rewrite_attachments(pdf, bad, attached)
    code, out, _ = run_cli("verify", bad)
    assert code == 1 and re.search(r"^  ok  ", out, flags=re.M)  # the full list has ok lines
    code, out, _ = run_cli("verify", bad, "-q")
    assert code == 1
    lines = out.splitlines()
    assert lines[0] == f"{bad}: NOT GENUINE"
    assert lines[1:] and all(ln.startswith(("  FAIL  ", "          ")) for ln in lines[1:])


@pytest.mark.render
def test_register_output_by_ending_and_json(run_cli, tmp_path: Path) -> None:
    import datetime as dt

    from reportgen.archive import archive_revision
    from tests._revisions import make_revision

    root = tmp_path / "archive"
    archive_revision(
        make_revision(tmp_path / "output"),
        archive_dir=root,
        now=dt.datetime(2026, 3, 1, 12, 0, tzinfo=dt.UTC),
    )
    pdf, csv_file = tmp_path / "reg.pdf", tmp_path / "reg.csv"
    base = ("register", "--archive", root, "--as-of", "2026-06-01")
    code, out, err = run_cli(*base, "-o", pdf, "-o", csv_file, "--json")
    assert code == 0, err
    assert pdf.read_bytes().startswith(b"%PDF-")
    rows = json.loads(out)["rows"]
    assert rows and json.loads(out)["as_of"] == "2026-06-01"
    header = csv_file.read_text().splitlines()[0].split(",")
    assert sorted(rows[0]) == sorted(header)
    code, _, err = run_cli(*base, "-o", tmp_path / "reg.txt")
    assert code == 2 and "written as .csv, .html or .pdf" in err
