"""Limits and odd inputs (issue 13, item 10 of the attacks): each was a hang, a memory blow-up,
a leak of another file, or exit 70 "internal error"; each is now a clear exit 2, 3 or 5."""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from _revisions import make_revision

from reportgen.archive import INDEX_NAME, archive_revision, list_entries
from reportgen.errors import InputError
from reportgen.study import MAX_RESAMPLES, MAX_TRIALS


def _run(*args: str | Path, timeout: float = 60) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "reportgen", *map(str, args)],
        capture_output=True,
        text=True,
        timeout=timeout,  # a FIFO used to hang here
    )


def test_bootstrap_resamples_have_an_upper_bound(make_study, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    study = make_study(bootstrap={"resamples": 10**8, "seed": 1})
    r = _run("check", study)
    assert r.returncode == 2, r.stderr  # before: accepted, and verify then used 3-4 GB
    assert f"bootstrap.resamples: must be at most {MAX_RESAMPLES:,}, got 100,000,000" in r.stderr
    at_limit = make_study(tmp_path / "ok", bootstrap={"resamples": MAX_RESAMPLES, "seed": 1})
    assert "bootstrap.resamples" not in _run("check", at_limit).stderr


def test_trials_far_too_many_is_input_error(make_study) -> None:  # type: ignore[no-untyped-def]
    study = make_study(trials=2)
    text = study.read_text().replace("trials: 2", "trials: 100000000000000000000")
    study.write_text(text)
    r = _run("check", study)
    assert r.returncode == 2, r.stderr  # before: exit 70
    assert f"trials: must be at most {MAX_TRIALS:,}" in r.stderr


def test_study_date_in_year_9999_is_input_error(make_study) -> None:  # type: ignore[no-untyped-def]
    study = make_study(study={"date": "9999-06-01"})
    r = _run("check", study)
    assert r.returncode == 2, r.stderr  # before: exit 70 (valid-until past year 9999)
    assert "9999-06-01 is outside the dates accepted (1900-01-01 to 2999-12-31)" in r.stderr


def test_generated_at_that_overflows_is_input_error(make_study, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    study = make_study(bootstrap={"resamples": 0, "seed": 1})
    r = _run(
        "build",
        study,
        "-o",
        tmp_path / "out",
        "--no-pdf",
        "-q",
        "--generated-at",
        "9999-12-31T23:59:59-12:00",
    )
    assert r.returncode == 2, r.stderr  # before: exit 70
    assert "--generated-at: error: 9999-12-31T23:59:59-12:00 is outside the build times" in r.stderr
    assert not (tmp_path / "out").exists()


def test_build_into_dev_null_is_input_error(make_study) -> None:  # type: ignore[no-untyped-def]
    study = make_study(bootstrap={"resamples": 0, "seed": 1})
    r = _run("build", study, "-o", "/dev/null", "--no-pdf", "-q")
    assert r.returncode == 2, r.stderr  # before: exit 70
    assert "this output path is not a folder (a file or a device)" in r.stderr


def test_ratings_symlink_to_a_device_is_refused(make_study) -> None:  # type: ignore[no-untyped-def]
    study = make_study()
    ratings = study.parent / "ratings.csv"
    ratings.unlink()
    ratings.symlink_to("/dev/zero")
    r = _run("check", study)
    assert r.returncode == 2, r.stderr  # before: read until 8.9 GB
    assert "the ratings is a device, not a regular file; only regular files are read" in r.stderr


def test_ratings_fifo_is_refused_without_waiting(make_study) -> None:  # type: ignore[no-untyped-def]
    study = make_study()
    ratings = study.parent / "ratings.csv"
    ratings.unlink()
    os.mkfifo(ratings)
    r = _run("check", study, timeout=30)
    assert r.returncode == 2, r.stderr  # before: waited forever
    assert "the ratings is a FIFO (named pipe), not a regular file" in r.stderr


def test_study_definition_fifo_is_refused(tmp_path: Path) -> None:
    fifo = tmp_path / "study.yaml"
    os.mkfifo(fifo)
    r = _run("check", fifo, timeout=30)
    assert r.returncode == 2 and "FIFO (named pipe)" in r.stderr, r.stderr


def test_symlink_in_a_company_template_folder_is_refused(make_study, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    """Attack 8: a symlink to /etc/passwd inside the template folder, included by a template."""
    study = make_study(
        bootstrap={"resamples": 0, "seed": 1},
        report={"templates": "company"},
        files={
            "company/report.html": '{% extends "default:report.html" %}'
            '{% block footer %}{% include "secret.txt" %}{% endblock %}\n'
        },
    )
    (study.parent / "company" / "secret.txt").symlink_to("/etc/passwd")
    out = tmp_path / "out"
    r = _run("build", study, "-o", out, "--no-pdf", "-q")
    assert r.returncode == 3, r.stderr  # before: exit 0 with /etc/passwd in the HTML and PDF
    assert "secret.txt is a symbolic link; templates are read only from regular files" in r.stderr
    assert not out.exists() or not any(out.rglob("*.html"))


def test_template_loader_refuses_special_files(tmp_path: Path) -> None:
    from reportgen.errors import RenderError
    from reportgen.templatefiles import check_regular, regular_template_files

    folder = tmp_path / "company"
    folder.mkdir()
    (folder / "ok.html").write_text("x")
    assert regular_template_files(folder) == [folder / "ok.html"]
    check_regular(folder, folder / "ok.html")
    os.mkfifo(folder / "pipe.html")
    with pytest.raises(RenderError, match="not a regular file"):
        check_regular(folder, folder / "pipe.html")
    with pytest.raises(RenderError, match="not a regular file"):
        regular_template_files(folder)


def test_damaged_index_row_is_input_error(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output"), archive_dir=root)
    with sqlite3.connect(root / INDEX_NAME) as conn:
        conn.execute("DROP TRIGGER revisions_read_only_update")
        conn.execute("UPDATE revisions SET figures = '{not json'")
    with pytest.raises(InputError, match="the archive index is damaged"):
        list_entries(root)
    r = _run("register", "--archive", root)
    assert r.returncode == 2, r.stderr  # before: exit 70
    assert "index.sqlite: error: the archive index is damaged" in r.stderr
