"""Regression tests for defects found in a hands-on audit: no command may overwrite an archived
report or a user's file, and an unwritable output path is bad usage (exit 2), not exit 70.

Archives here are made with the light ``make_revision`` helper (no render stack); the one real
build uses ``--no-pdf`` and no bootstrap, so the module stays quick.
"""

from __future__ import annotations

import datetime as dt
import os
import subprocess
import sys
from pathlib import Path

import pytest
from _built import self_signed_p12
from _revisions import make_revision

from reportgen.archive import archive_revision, is_read_only, write_output
from reportgen.errors import ExistsError, InputError

NOW = dt.datetime(2026, 3, 1, 12, 0, tzinfo=dt.UTC)


@pytest.fixture
def archived(tmp_path: Path) -> Path:
    """An archive holding SEAL-CHECK rev1; returns the archived revision folder."""
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    root = tmp_path / "archive"
    archive_revision(rev, archive_dir=root, now=NOW)
    return root / "SEAL-CHECK" / "rev1"


def _snapshot(folder: Path) -> dict[str, bytes]:
    return {
        str(p.relative_to(folder)): p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()
    }


# -- write_output (history -o, register --csv/--html, sign) ----------------------------------


def test_write_output_never_replaces_a_read_only_file(tmp_path: Path) -> None:
    """Defect: `history -o` replaced a read-only (built or archived) report; as root the
    write bits are not enforced by the system, so reportgen must check them itself."""
    target = tmp_path / "report.html"
    target.write_bytes(b"the built report\n")
    os.chmod(target, 0o444)
    with pytest.raises(ExistsError, match="is read-only"):
        write_output(target, b"something else")
    assert target.read_bytes() == b"the built report\n"


def test_write_output_never_writes_into_an_archived_revision(archived: Path) -> None:
    before = _snapshot(archived)
    with pytest.raises(ExistsError, match="is inside the archive"):
        write_output(archived / "history.html", b"<html></html>")
    with pytest.raises(ExistsError, match="is inside the archive"):
        write_output(archived / "SEAL-CHECK-rev1.html", b"<html></html>")
    assert _snapshot(archived) == before


def test_write_output_under_a_file_is_input_error(tmp_path: Path) -> None:
    """Defect: `register --csv some-file/x.csv` ended with exit 70 'internal error'."""
    blocker = tmp_path / "notes.txt"
    blocker.write_text("keep\n")
    with pytest.raises(InputError) as exc:
        write_output(blocker / "register.csv", b"x")
    p = exc.value.problems()[0]
    assert p.location.path == str(blocker / "register.csv")
    assert p.message == f"cannot write this file: {blocker} is a file, not a folder"
    assert blocker.read_text() == "keep\n"


def test_history_output_into_the_archive_exits_5(archived: Path, run_cli) -> None:
    root = archived.parent.parent
    before = _snapshot(archived)
    code, _, err = run_cli("history", "--archive", root, "-o", archived / "SEAL-CHECK-rev1.html")
    assert code == 5 and "is inside the archive" in err
    code, _, err = run_cli("register", "--archive", root, "-q", "--csv", archived / "register.csv")
    assert code == 5 and "is inside the archive" in err
    assert _snapshot(archived) == before


# -- build into the archive, build --replace over files it did not write ----------------------


def test_build_replace_never_touches_an_archived_revision(
    archived: Path, make_study, run_cli
) -> None:
    """Defect: `build --replace -o ARCHIVE` swapped out an archived revision folder (its PDF and
    archive-entry.json were deleted)."""
    root = archived.parent.parent
    study = make_study(study={"id": "SEAL-CHECK", "revision": 1})
    before = _snapshot(archived)
    code, _, err = run_cli("build", study, "-o", root, "--replace", "--no-pdf", "-q")
    assert code == 5 and "is a reportgen archive" in err
    assert _snapshot(archived) == before and is_read_only(archived)
    code, _, err = run_cli(
        "build", make_study(study={"id": "OTHER", "revision": 1}), "-o", root, "--no-pdf", "-q"
    )
    assert code == 5 and not (root / "OTHER").exists()


@pytest.mark.render
def test_build_replace_keeps_files_it_did_not_write(make_study, run_cli, tmp_path: Path) -> None:
    """Defect: `build --replace` deleted the signed copy `reportgen sign` had written beside the report."""
    study = make_study(bootstrap={"resamples": 0, "seed": 1})
    out = tmp_path / "out"
    assert (
        run_cli(
            "build", study, "-o", out, "--no-pdf", "-q", "--generated-at", "2026-11-20T09:00:00Z"
        )[0]
        == 0
    )
    rev = out / "TEST-01" / "rev1"
    (rev / "TEST-01-rev1-signed.pdf").write_bytes(b"%PDF-1.7 signed copy\n")
    before = _snapshot(rev)
    code, _, err = run_cli("build", study, "-o", out, "--replace", "--no-pdf", "-q")
    assert code == 5
    assert "holds files that build did not write (TEST-01-rev1-signed.pdf)" in err
    assert _snapshot(rev) == before
    (rev / "TEST-01-rev1-signed.pdf").unlink()
    assert run_cli("build", study, "-o", out, "--replace", "--no-pdf", "-q")[0] == 0
    assert "DRAFT" in (rev / "TEST-01-rev1.html").read_text(encoding="utf-8")


def test_quiet_has_its_short_form_on_every_command_that_has_it(run_cli) -> None:
    """Defect: `-q` worked for stats, archive, verify, register but not for build, plan, demo."""
    for cmd in ("build", "plan", "demo", "stats", "archive", "verify", "register"):
        code, out, _ = run_cli(cmd, "--help")
        assert code == 0 and "-q, --quiet" in out, cmd


# -- sign: a wrong passphrase is one plain message ---------------------------------------------


@pytest.mark.slow
def test_sign_wrong_passphrase_prints_no_traceback(tmp_path: Path) -> None:
    """Defect: pyHanko's logger printed a Python traceback before our message."""
    p12, _ = self_signed_p12(tmp_path)
    pdf = tmp_path / "report.pdf"
    pdf.write_bytes(b"%PDF-1.7\n")
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "reportgen",
            "sign",
            str(pdf),
            "--key",
            str(p12),
            "--passphrase-env",
            "QA_PASS",
        ],
        capture_output=True,
        text=True,
        timeout=120,
        env={**os.environ, "QA_PASS": "wrong"},
    )
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr
    assert proc.stderr.strip().splitlines() == [
        f"{p12}: error: cannot read the PKCS#12 key file (wrong or missing passphrase?)",
        "  hint: check the passphrase",
    ]
    assert not (tmp_path / "report-signed.pdf").exists()


# -- archive: the folder must still be the one build wrote ------------------------------------


def test_archive_refuses_a_results_json_changed_after_build(tmp_path: Path) -> None:
    """Defect: a results.json edited after build (verdict IMPROVE turned PASS) was archived, and
    the index, register and history then showed the edited verdict."""
    import json

    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1, verdict="IMPROVE")
    data = json.loads((rev / "results.json").read_text())
    data["verdict"]["outcome"] = "PASS"
    (rev / "results.json").write_text(json.dumps(data, indent=2) + "\n")
    root = tmp_path / "archive"
    with pytest.raises(InputError) as exc:
        archive_revision(rev, archive_dir=root, now=NOW)
    p = exc.value.problems()[0]
    assert p.location.path == str(rev / "results.json")
    assert p.message.startswith("differs from the results.json attached to the report PDF")
    assert not (root / "SEAL-CHECK").exists()


def test_a_rater_with_no_rating_keeps_the_earlier_certification() -> None:
    """Defect: a requalification in which inspector R1 gave no rating (missing: allow) archived
    R1 as 'not certified', and the register ended R1's valid certification from the year before."""
    from reportgen.archive import certification_summary

    results = {
        "design": {"items": 30, "trials": 2},
        "caveats": {"missing": {"by_rater": {"R1": 60, "R2": 0, "R3": 3}}},
        "certification": {
            "study_date": "2027-01-10",
            "valid_months": 12,
            "due_window_days": 30,
            "inspectors": [
                {"rater": "R1", "name": "Ana Ruiz", "outcome": "not certified"},
                {
                    "rater": "R2",
                    "name": "Ben Okafor",
                    "outcome": "certified",
                    "valid_until": "2028-01-31",
                },
                {"rater": "R3", "name": "Chen Wu", "outcome": "not certified"},
            ],
        },
    }
    summary = certification_summary(results, {})
    assert sorted(summary) == ["R2", "R3"]  # R3 missed 3 ratings but took part
    assert summary["R3"]["outcome"] == "not certified"
    assert summary["R2"]["valid_until"] == "2028-01-31"


def test_archive_into_a_damaged_index_is_bad_input(tmp_path: Path, run_cli) -> None:
    """Defect: `archive` into a folder whose index.sqlite is not a database ended with exit 70
    (history and register already said 'not a reportgen archive index')."""
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    root = tmp_path / "archive"
    root.mkdir()
    (root / "index.sqlite").write_bytes(b"not a database, just text\n")
    code, _, err = run_cli("archive", rev, "--archive", root)
    assert code == 2 and "not a reportgen archive index" in err
    assert sorted(p.name for p in root.iterdir()) == ["index.sqlite"]
