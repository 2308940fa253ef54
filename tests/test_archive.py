"""The archive: read-only copies, the SQLite index, refusal to overwrite, crash and concurrency safety."""

from __future__ import annotations

import datetime as dt
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import pytest
from _revisions import make_revision

from reportgen.archive import (
    ENTRY_NAME,
    INDEX_NAME,
    archive_revision,
    is_read_only,
    list_entries,
    resolve_archive_dir,
)
from reportgen.errors import ExistsError, InputError

NOW = dt.datetime(2026, 3, 1, 12, 0, tzinfo=dt.UTC)


def _run(
    *args: str, env: dict[str, str] | None = None, cwd: Path | None = None
) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "reportgen", *args],
        capture_output=True,
        text=True,
        env={**os.environ, **(env or {})},
        cwd=cwd,
        timeout=120,
    )


def _spawn(*args: str, env: dict[str, str]) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, "-m", "reportgen", *args],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env={**os.environ, **env},
    )


def _kill(proc: subprocess.Popen[str]) -> None:
    proc.send_signal(signal.SIGKILL)
    proc.communicate(timeout=30)  # reaps the process and closes its pipes


def _rows(root: Path) -> list[tuple[str, int]]:
    with sqlite3.connect(root / INDEX_NAME) as conn:
        return sorted(conn.execute("SELECT study_id, revision FROM revisions").fetchall())


def _wait_for(cond, timeout: float = 30.0) -> None:  # type: ignore[no-untyped-def]
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        if cond():
            return
        time.sleep(0.02)
    raise AssertionError("condition not reached in time")


def test_archive_copies_read_only_and_indexes(tmp_path: Path) -> None:
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1, kappa=0.81)
    root = tmp_path / "archive"
    entry = archive_revision(rev, archive_dir=root, now=NOW)

    final = root / "SEAL-CHECK" / "rev1"
    assert entry.folder == "SEAL-CHECK/rev1"
    for rel in (
        "results.json",
        "SEAL-CHECK-rev1.pdf",
        "SEAL-CHECK-rev1.html",
        "charts/agreement.svg",
    ):
        assert (final / rel).read_bytes() == (rev / rel).read_bytes()
        assert is_read_only(final / rel)
    assert is_read_only(final)
    assert json.loads((final / ENTRY_NAME).read_text())["item_set_sha256"] == entry.item_set_sha256

    [row] = list_entries(root)
    assert (row.study_id, row.revision, row.verdict) == ("SEAL-CHECK", 1, "PASS")
    assert row.study_date == "2026-01-15"  # from the study definition attached to the PDF
    assert row.characteristic == "Seal seating" and row.station == "Press line 2"
    assert row.archived_at == "2026-03-01T12:00:00Z"
    assert row.figures["panel"]["reproducibility.fleiss_kappa"]["estimate"] == 0.81
    assert row.figures["raters"]["I1"]["accuracy.agreement"]["ci_low"] == pytest.approx(0.85)
    assert row.certification["I2"] == {
        "name": "Ben Okafor",
        "outcome": "certified",
        "assessed_on": "2026-01-15",
        "certified_on": "2026-01-15",
        "valid_until": "2027-01-31",
        "due_window_days": 30,
    }
    assert set(row.files) == {
        "results.json",
        "SEAL-CHECK-rev1.pdf",
        "SEAL-CHECK-rev1.html",
        "charts/agreement.svg",
        "SHA256SUMS",
    }
    assert set(row.inputs) == {"study.yaml", "ratings.csv", "reference.csv"}
    assert len(row.items) == 30


def test_never_overwrites_and_new_revision_supersedes(tmp_path: Path) -> None:
    out, root = tmp_path / "output", tmp_path / "archive"
    rev1 = make_revision(out, "SEAL-CHECK", 1)
    archive_revision(rev1, archive_dir=root, now=NOW)
    before = (root / "SEAL-CHECK" / "rev1" / "results.json").read_bytes()

    # the very same files again (a re-run): nothing to do, the archived entry is returned
    again = archive_revision(rev1, archive_dir=root, now=NOW + dt.timedelta(days=1))
    assert again.archived_at == "2026-03-01T12:00:00Z"
    # another build of the same revision is refused
    other = make_revision(tmp_path / "other", "SEAL-CHECK", 1, kappa=0.5)
    with pytest.raises(ExistsError, match="already archived"):
        archive_revision(other, archive_dir=root, now=NOW)
    assert (root / "SEAL-CHECK" / "rev1" / "results.json").read_bytes() == before
    assert not [p for p in (root / "SEAL-CHECK").iterdir() if p.name.startswith(".")]

    rev2 = make_revision(out, "SEAL-CHECK", 2, date="2027-01-10", kappa=0.7)
    archive_revision(rev2, archive_dir=root, now=NOW)
    assert [
        (e.revision, e.figures["panel"]["reproducibility.fleiss_kappa"]["estimate"])
        for e in list_entries(root)
    ] == [(1, 0.8), (2, 0.7)]
    # the CLI reports the refusal with exit code 5
    r = _run("archive", str(other), "--archive", str(root))
    assert r.returncode == 5, r.stderr
    assert "already archived" in r.stderr


def test_index_rows_cannot_be_changed_or_deleted(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output"), archive_dir=root, now=NOW)
    with sqlite3.connect(root / INDEX_NAME) as conn:
        with pytest.raises(sqlite3.DatabaseError, match="read-only"):
            conn.execute("UPDATE revisions SET verdict = 'PASS'")
        with pytest.raises(sqlite3.DatabaseError, match="never deleted"):
            conn.execute("DELETE FROM revisions")
    assert _rows(root) == [("SEAL-CHECK", 1)]


def test_archive_location(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    rev = make_revision(tmp_path / "project" / "output")
    monkeypatch.delenv("REPORTGEN_ARCHIVE", raising=False)
    assert (
        resolve_archive_dir(None, revision_dir=rev) == (tmp_path / "project" / "archive").resolve()
    )
    assert (
        resolve_archive_dir(None, study_path=tmp_path / "project" / "studies" / "x" / "study.yaml")
        == (tmp_path / "project" / "archive").resolve()
    )
    monkeypatch.setenv("REPORTGEN_ARCHIVE", str(tmp_path / "elsewhere"))
    assert resolve_archive_dir(None, revision_dir=rev) == (tmp_path / "elsewhere").resolve()
    assert (
        resolve_archive_dir(tmp_path / "given", revision_dir=rev) == (tmp_path / "given").resolve()
    )
    monkeypatch.delenv("REPORTGEN_ARCHIVE")
    # the command line's rule (reportgen/places.py): no archive found upwards -> ./archive
    r = _run("archive", str(rev), "--quiet", env={"REPORTGEN_ARCHIVE": ""}, cwd=rev.parents[2])
    assert r.returncode == 0, r.stderr
    assert _rows(tmp_path / "project" / "archive") == [("SEAL-CHECK", 1)]


def test_bad_revision_folders_are_refused(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    with pytest.raises(InputError, match="not a folder"):
        archive_revision(tmp_path / "nope", archive_dir=root)
    empty = tmp_path / "output" / "X" / "rev1"
    empty.mkdir(parents=True)
    with pytest.raises(InputError, match="no results.json"):
        archive_revision(empty, archive_dir=root)
    rev = make_revision(tmp_path / "out2", "SEAL-CHECK", 3)
    renamed = rev.parent / "rev4"
    rev.rename(renamed)
    with pytest.raises(InputError, match="folder name does not match"):
        archive_revision(renamed, archive_dir=root)
    rev = make_revision(tmp_path / "out3", "SEAL-CHECK", 1)
    (rev / "link").symlink_to("/etc/hostname")
    with pytest.raises(InputError, match="symbolic links"):
        archive_revision(rev, archive_dir=root)
    rev = make_revision(tmp_path / "out4", "SEAL-CHECK", 1)
    (rev / "SHA256SUMS").write_text("0" * 64 + "  results.json\n")
    with pytest.raises(InputError, match="no longer matches the manifest"):
        archive_revision(rev, archive_dir=root)
    assert _rows(root) == [] if (root / INDEX_NAME).exists() else True
    r = _run("archive", str(empty), "--archive", str(root))
    assert r.returncode == 2 and "no results.json" in r.stderr


def test_kill_during_copy_leaves_no_half_entry(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output", big_file_bytes=1 << 20)
    proc = _spawn(
        "archive", str(rev), "--archive", str(root), env={"REPORTGEN_TEST_ARCHIVE_PAUSE": "copy:60"}
    )
    study_dir = root / "SEAL-CHECK"
    _wait_for(
        lambda: (
            study_dir.is_dir()
            and any(
                p.name.startswith(".partial-") and any(p.rglob("*")) for p in study_dir.iterdir()
            )
        )
    )
    _kill(proc)
    assert proc.returncode == -signal.SIGKILL

    # consistent: no row, no final folder; only a hidden partial copy, which readers ignore
    assert _rows(root) == []
    assert not (study_dir / "rev1").exists()
    assert list_entries(root) == []
    [partial] = [p for p in study_dir.iterdir()]
    assert partial.name.startswith(".partial-rev1-")

    # the next run cleans the partial copy (its process is gone) and archives normally
    r = _run("archive", str(rev), "--archive", str(root))
    assert r.returncode == 0, r.stderr
    assert [p.name for p in study_dir.iterdir()] == ["rev1"]
    assert _rows(root) == [("SEAL-CHECK", 1)]
    assert (study_dir / "rev1" / "charts" / "zz-big.bin").stat().st_size == 1 << 20


def test_kill_between_rename_and_commit_is_rolled_forward(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    proc = _spawn(
        "archive",
        str(rev),
        "--archive",
        str(root),
        env={"REPORTGEN_TEST_ARCHIVE_PAUSE": "commit:60"},
    )
    _wait_for(lambda: (root / "SEAL-CHECK" / "rev1").is_dir())
    _kill(proc)
    assert _rows(root) == []  # the transaction died with the process
    assert (root / "SEAL-CHECK" / "rev1" / ENTRY_NAME).is_file()

    # the next archive run (of another study) finds the whole folder, checks it and indexes it
    other = make_revision(tmp_path / "output", "CRIMP-CHECK", 1)
    r = _run("archive", str(other), "--archive", str(root))
    assert r.returncode == 0, r.stderr
    assert _rows(root) == [("CRIMP-CHECK", 1), ("SEAL-CHECK", 1)]
    r = _run("archive", str(rev), "--archive", str(root))  # re-run: the work is complete
    assert r.returncode == 0, r.stderr
    assert "archived SEAL-CHECK rev1 (PASS, 5 files)" in r.stdout


def test_a_changed_folder_is_not_rolled_forward(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    proc = _spawn(
        "archive",
        str(rev),
        "--archive",
        str(root),
        env={"REPORTGEN_TEST_ARCHIVE_PAUSE": "commit:60"},
    )
    final = root / "SEAL-CHECK" / "rev1"
    _wait_for(lambda: final.is_dir())
    _kill(proc)
    os.chmod(final, 0o755)
    os.chmod(final / "results.json", 0o644)
    (final / "results.json").write_text("{}")
    messages: list[str] = []
    archive_revision(
        make_revision(tmp_path / "output", "CRIMP-CHECK", 1),
        archive_dir=root,
        progress=messages.append,
    )
    assert _rows(root) == [("CRIMP-CHECK", 1)]
    assert any("do not match" in m for m in messages)


def test_two_studies_archived_concurrently(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    revs = [
        make_revision(tmp_path / "output", sid, 1)
        for sid in ("SEAL-CHECK", "CRIMP-CHECK", "LABEL-CHECK")
    ]
    procs = [
        _spawn(
            "archive",
            str(r),
            "--archive",
            str(root),
            env={"REPORTGEN_TEST_ARCHIVE_PAUSE": "copy:0.5"},
        )
        for r in revs
    ]
    outs = [p.communicate(timeout=120) for p in procs]
    assert [p.returncode for p in procs] == [0, 0, 0], outs
    assert _rows(root) == [("CRIMP-CHECK", 1), ("LABEL-CHECK", 1), ("SEAL-CHECK", 1)]
    for sid in ("SEAL-CHECK", "CRIMP-CHECK", "LABEL-CHECK"):
        assert sorted(p.name for p in (root / sid).iterdir()) == ["rev1"]


def test_same_revision_archived_twice_at_once_one_wins(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output")
    procs = [
        _spawn(
            "archive",
            str(rev),
            "--archive",
            str(root),
            env={"REPORTGEN_TEST_ARCHIVE_PAUSE": "copy:0.5"},
        )
        for _ in range(2)
    ]
    outs = [p.communicate(timeout=120) for p in procs]
    assert sorted(p.returncode for p in procs) == [0, 5], outs
    assert _rows(root) == [("SEAL-CHECK", 1)]
    assert [p.name for p in (root / "SEAL-CHECK").iterdir()] == ["rev1"]


def test_drafts_are_not_archived(tmp_path: Path) -> None:
    rev = make_revision(tmp_path / "output", state="draft")
    with pytest.raises(InputError, match="drafts are not archived"):
        archive_revision(rev, archive_dir=tmp_path / "archive")
