"""The archive trusts only what it hashed; outputs never land inside it (issue 13, attacks 3-5, 7, 9).

Each test performs the attack on a revision folder made by ``make_revision`` (no render stack:
what ``build`` writes, including ``SHA256SUMS`` and the PDF's build record) and shows the refusal
or the detection with its message.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
from _revisions import make_revision

from reportgen.archive import (
    ENTRY_NAME,
    INDEX_NAME,
    KILL_STEPS,
    archive_revision,
    list_entries,
)
from reportgen.archivecheck import recheck_entry
from reportgen.errors import ExistsError, InputError

NOW = dt.datetime(2026, 3, 1, 12, 0, tzinfo=dt.UTC)


def _run(*args: str, env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "reportgen", *map(str, args)],
        capture_output=True,
        text=True,
        env={**os.environ, **(env or {})},
        timeout=120,
    )


def _rows(root: Path) -> list[tuple[str, int]]:
    with sqlite3.connect(root / INDEX_NAME) as conn:
        return sorted(conn.execute("SELECT study_id, revision FROM revisions").fetchall())


def _writable(path: Path) -> None:
    for p in [path, *path.rglob("*")]:
        os.chmod(p, 0o755 if p.is_dir() else 0o644)


# -- attack 3: a draft archived as a release ---------------------------------------------------


def test_a_draft_is_refused_by_its_build_record(tmp_path: Path) -> None:
    rev = make_revision(tmp_path / "output", state="draft")
    with pytest.raises(InputError) as exc:
        archive_revision(rev, archive_dir=tmp_path / "archive")
    assert exc.value.problems()[0].message == (
        "this is a draft (built with --replace; its build record says so); drafts are not archived"
    )
    assert not (tmp_path / "archive" / "SEAL-CHECK").exists()


# -- attack 9: files edited before archive -------------------------------------------------------


def test_edited_html_is_refused_with_the_file_named(tmp_path: Path) -> None:
    rev = make_revision(tmp_path / "output", verdict="IMPROVE")
    html = rev / "SEAL-CHECK-rev1.html"
    html.write_text(html.read_text().replace("SEAL-CHECK", "SEAL-CHECK PASS"))
    with pytest.raises(InputError) as exc:
        archive_revision(rev, archive_dir=tmp_path / "archive")
    p = exc.value.problems()[0]
    assert p.location.path == str(html)
    assert p.message == (
        "SEAL-CHECK-rev1.html: the folder no longer matches the manifest written by build "
        "(edited after build: its SHA-256 differs)"
    )


def test_edited_html_with_a_rewritten_manifest_is_refused(tmp_path: Path) -> None:
    """The forger also rewrites SHA256SUMS: the PDF's build record still holds the true value."""
    rev = make_revision(tmp_path / "output", verdict="IMPROVE")
    html = rev / "SEAL-CHECK-rev1.html"
    html.write_text("<html><body>PASS</body></html>\n")
    lines = []
    for line in (rev / "SHA256SUMS").read_text().splitlines():
        digest, name = line.split("  ", 1)
        if name == html.name:
            digest = hashlib.sha256(html.read_bytes()).hexdigest()
        lines.append(f"{digest}  {name}")
    (rev / "SHA256SUMS").write_text("\n".join(lines) + "\n")
    with pytest.raises(InputError) as exc:
        archive_revision(rev, archive_dir=tmp_path / "archive")
    p = exc.value.problems()[0]
    assert p.location.path == str(html)
    assert p.message == (
        "SEAL-CHECK-rev1.html: edited after build: its SHA-256 is not the one the report PDF's "
        "build record holds"
    )


def test_folder_without_manifest_or_with_a_foreign_file_is_refused(tmp_path: Path) -> None:
    rev = make_revision(tmp_path / "output")
    (rev / "notes.txt").write_text("my notes\n")
    with pytest.raises(
        InputError, match=r"notes.txt was not written by build \(it is not in SHA256SUMS\)"
    ):
        archive_revision(rev, archive_dir=tmp_path / "archive")
    (rev / "notes.txt").unlink()
    (rev / "SHA256SUMS").unlink()
    with pytest.raises(InputError, match="no SHA256SUMS here"):
        archive_revision(rev, archive_dir=tmp_path / "archive")


def test_fifo_in_the_folder_is_refused(tmp_path: Path) -> None:
    rev = make_revision(tmp_path / "output")
    os.mkfifo(rev / "pipe")
    with pytest.raises(InputError, match="a special file"):
        archive_revision(rev, archive_dir=tmp_path / "archive")


# -- attack 4: a hand-written archive-entry.json -------------------------------------------------


def test_hand_written_entry_is_never_indexed(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output", "SEAL-CHECK", 1), archive_dir=root, now=NOW)
    forged = root / "GHOST-CHECK" / "rev1"
    forged.mkdir(parents=True)
    [real] = list_entries(root)
    fake = dict(real.__dict__)
    fake.update(
        study_id="GHOST-CHECK",
        folder="GHOST-CHECK/rev1",
        files={},
        verdict="PASS",
        certification={
            "G1": {
                "name": "Ghost One",
                "outcome": "certified",
                "certified_on": "2026-02-01",
                "valid_until": "2027-02-28",
                "assessed_on": "2026-02-01",
                "due_window_days": 30,
            },
        },
    )
    (forged / ENTRY_NAME).write_text(json.dumps(fake))
    messages: list[str] = []
    archive_revision(
        make_revision(tmp_path / "output", "CRIMP-CHECK", 1),
        archive_dir=root,
        now=NOW,
        progress=messages.append,
    )
    assert _rows(root) == [("CRIMP-CHECK", 1), ("SEAL-CHECK", 1)]  # before: GHOST-CHECK too
    assert (
        "ignored GHOST-CHECK/rev1: the index holds no record of archiving it, so it was not made "
        "by reportgen archive (a archive-entry.json alone is never indexed)"
    ) in messages
    r = _run("register", "--archive", root, "--as-of", "2026-06-01")
    assert "Ghost One" not in r.stdout


# -- attack 5: a kill at every step; re-running archive completes the work -----------------------


@pytest.mark.parametrize("step", KILL_STEPS)
def test_kill_at_every_step_then_rerun_completes(tmp_path: Path, step: str) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    r = _run("archive", rev, "--archive", root, env={"REPORTGEN_TEST_ARCHIVE_KILL": step})
    assert r.returncode == 137, r.stderr  # killed, no clean-up
    r = _run("archive", rev, "--archive", root)
    assert r.returncode == 0, r.stderr
    assert "archived SEAL-CHECK rev1 (PASS, 5 files)" in r.stdout
    assert _rows(root) == [("SEAL-CHECK", 1)]
    assert sorted(p.name for p in (root / "SEAL-CHECK").iterdir()) == ["rev1"]
    [entry] = list_entries(root)
    assert recheck_entry(root, entry) == []
    with sqlite3.connect(root / INDEX_NAME) as conn:
        assert conn.execute("SELECT COUNT(*) FROM pending").fetchone() == (0,)
    h = _run("history", "--archive", root)
    assert h.returncode == 0 and "SEAL-CHECK" in h.stdout, h.stderr


def test_another_build_of_an_archived_revision_is_still_refused(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "a", "SEAL-CHECK", 1), archive_dir=root, now=NOW)
    with pytest.raises(ExistsError, match="already archived"):
        archive_revision(
            make_revision(tmp_path / "b", "SEAL-CHECK", 1, kappa=0.3), archive_dir=root
        )


# -- attack 9: archived files replaced afterwards --------------------------------------------------


def test_replaced_archived_pdf_is_named_by_history_register_and_verify(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    archive_revision(rev, archive_dir=root, now=NOW)
    final = root / "SEAL-CHECK" / "rev1"
    r = _run("verify", "--archive", root)
    assert r.returncode == 0, r.stdout + r.stderr
    assert (
        "intact — all 5 archived file(s) of 1 revision(s) have the SHA-256 of the index" in r.stdout
    )
    _writable(final)
    (final / "SEAL-CHECK-rev1.pdf").write_bytes(b"%PDF-1.7 forged\n")
    (final / "extra.txt").write_text("x")
    expected = [
        "SEAL-CHECK/rev1/SEAL-CHECK-rev1.pdf: changed (its SHA-256 is not the one in the index)",
        "SEAL-CHECK/rev1/extra.txt: added after archiving",
    ]
    [entry] = list_entries(root)
    assert recheck_entry(root, entry) == expected
    for args in (("history",), ("register", "--as-of", "2026-06-01")):
        r = _run(*args, "--archive", root)
        assert r.returncode == 1, (args, r.stderr)
        assert "2 archived file(s) differ from the SHA-256 values of the index" in r.stderr
        assert expected[0] in r.stderr and expected[1] in r.stderr
    r = _run("verify", "--archive", root)
    assert r.returncode == 1
    assert f"  FAIL  {expected[0]}" in r.stdout and "NOT INTACT" in r.stdout


def test_verify_archive_says_whether_a_report_is_archived(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    rev = make_revision(tmp_path / "output", "SEAL-CHECK", 1)
    archive_revision(rev, archive_dir=root, now=NOW)
    from reportgen.archivecheck import archive_summary

    ok, lines = archive_summary(root, list_entries(root), rev / "SEAL-CHECK-rev1.pdf")
    assert ok
    assert lines[1] == (
        "  SEAL-CHECK-rev1.pdf is archived: SEAL-CHECK/rev1/SEAL-CHECK-rev1.pdf (SEAL-CHECK "
        "revision 1, archived 2026-03-01T12:00:00Z)"
    )
    other = tmp_path / "other.pdf"
    other.write_bytes(b"%PDF-1.7\n")
    assert archive_summary(root, list_entries(root), other)[1][1] == (
        "  other.pdf is not in the archive (no archived file has its SHA-256)"
    )


# -- attack 7: outputs aimed into the archive ------------------------------------------------------


def test_register_csv_aimed_at_the_index_is_refused(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output"), archive_dir=root, now=NOW)
    before = (root / INDEX_NAME).read_bytes()
    for opt in ("--csv", "--html"):
        r = _run("register", "--archive", root, "-q", opt, root / INDEX_NAME)
        assert r.returncode == 5, r.stderr  # before: exit 0, the index replaced
        assert "is inside the archive" in r.stderr
    r = _run("history", "--archive", root, "-o", root / "trend.html")
    assert r.returncode == 5 and "is inside the archive" in r.stderr  # before: written there
    assert not (root / "trend.html").exists()
    assert (root / INDEX_NAME).read_bytes() == before


def test_outputs_never_replace_a_file_reportgen_did_not_write(tmp_path: Path) -> None:
    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output"), archive_dir=root, now=NOW)
    mine = tmp_path / "budget.csv"
    mine.write_text("month,amount\n1,2\n")
    r = _run("register", "--archive", root, "-q", "--csv", mine)
    assert r.returncode == 5 and "was not written by reportgen; it is never replaced" in r.stderr
    assert mine.read_text() == "month,amount\n1,2\n"
    ours = tmp_path / "register.csv"
    for _ in range(2):  # our own register file is replaced by a newer one
        r = _run("register", "--archive", root, "-q", "--csv", ours, "--as-of", "2026-06-01")
        assert r.returncode == 0, r.stderr
    r = _run("register", "--archive", root, "-q", "--csv", "/dev/null")
    assert r.returncode == 2 and "is not a regular file" in r.stderr


def test_build_and_plan_refuse_an_output_inside_an_archive(tmp_path: Path) -> None:
    from reportgen.outputs import archive_containing

    root = tmp_path / "archive"
    archive_revision(make_revision(tmp_path / "output"), archive_dir=root, now=NOW)
    deep = root / "sub" / "folder"
    assert archive_containing(deep) == root
    assert archive_containing(tmp_path / "elsewhere") is None
    from reportgen.outputs import refuse_inside_archive

    with pytest.raises(ExistsError, match="a plan is never written into an archive"):
        refuse_inside_archive(deep / "X" / "plan", "a plan")
