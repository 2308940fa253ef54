"""Signed copies of archived reports: append-only, indexed, beside the original.

An archived revision is read-only and is never changed, so signing it cannot add a signature to
the archived PDF itself.  ``sign --archive`` (or ``sign`` on a PDF inside an archive) signs a copy
and keeps it in the archive: ``<archive>/<study-id>/signed/<study-id>-rev<N>-signed-<k>.pdf``
(read-only, ``k`` = 1, 2, …, never overwritten), with one row in the index table
``signed_copies`` (rows can be neither changed nor deleted).  The file is written first and the
row inserted after, so a run killed in between leaves at most an unindexed file, which later runs
step over (the next copy gets the next ``k``).  ``verify`` and ``history`` list the copies.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import os
import sqlite3
import tempfile
from pathlib import Path
from typing import Any

from .errors import InputError

SIGNED_FOLDER = "signed"
SCHEMA = """
CREATE TABLE IF NOT EXISTS signed_copies (
    id          INTEGER PRIMARY KEY,
    study_id    TEXT    NOT NULL,
    revision    INTEGER NOT NULL,
    file        TEXT    NOT NULL UNIQUE, -- relative to the archive root
    sha256      TEXT    NOT NULL,
    original    TEXT    NOT NULL,        -- the archived PDF that was signed, relative path
    signer      TEXT,
    signed_at   TEXT,
    archived_at TEXT    NOT NULL
);
CREATE TRIGGER IF NOT EXISTS signed_copies_read_only_update BEFORE UPDATE ON signed_copies
BEGIN SELECT RAISE(ABORT, 'signed copies are read-only'); END;
CREATE TRIGGER IF NOT EXISTS signed_copies_read_only_delete BEFORE DELETE ON signed_copies
BEGIN SELECT RAISE(ABORT, 'signed copies are never deleted'); END;
"""


def archive_root_of(path: Path) -> Path | None:
    """The archive (the folder holding the index) that ``path`` lies in, else None."""
    from .archive import INDEX_NAME

    p = Path(os.path.abspath(path))
    for folder in p.parents:
        if (folder / INDEX_NAME).is_file():
            return folder
    return None


def _archived_report(pdf: Path, root: Path) -> tuple[str, int, str]:
    """(study id, revision, relative path) of an archived report PDF, or InputError."""
    from .archive import list_entries

    rel = pdf.resolve().relative_to(root.resolve())
    parts = rel.parts
    entries = {e.folder: e for e in list_entries(root)}
    folder = "/".join(parts[:2])
    if len(parts) != 3 or folder not in entries or parts[2] not in entries[folder].files:
        raise InputError.single(
            pdf,
            "not an archived report PDF of this archive (expected <archive>/<study-id>/rev<N>/<file>.pdf)",
        )
    e = entries[folder]
    return e.study_id, e.revision, rel.as_posix()


def _connect(root: Path) -> sqlite3.Connection:
    from .archive import _split_sql, open_index

    conn = open_index(root, create=False)
    conn.execute("BEGIN IMMEDIATE")
    try:
        for stmt in _split_sql(SCHEMA):
            conn.execute(stmt)
        conn.execute("COMMIT")
    except BaseException:
        conn.execute("ROLLBACK")
        conn.close()
        raise
    return conn


def signed_copies(
    root: Path, study_id: str | None = None, revision: int | None = None
) -> list[dict[str, Any]]:
    """The indexed signed copies (all, or of one revision), oldest first; [] without any."""
    from .archive import INDEX_NAME

    db = Path(root) / INDEX_NAME
    if not db.is_file():
        return []
    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True)
    conn.row_factory = sqlite3.Row
    try:
        rows = conn.execute(
            "SELECT study_id, revision, file, sha256, original, signer, signed_at, archived_at "
            "FROM signed_copies ORDER BY id"
        ).fetchall()
    except sqlite3.OperationalError:  # no table yet: nothing was signed
        return []
    finally:
        conn.close()
    out = [dict(r) for r in rows]
    return [
        r
        for r in out
        if (study_id is None or r["study_id"] == study_id)
        and (revision is None or r["revision"] == revision)
    ]


def sign_into_archive(
    pdf: Path,
    root: Path,
    *,
    key: Path,
    cert: Path | None,
    passphrase: bytes | None,
    reason: str,
    location: str | None,
    now: dt.datetime | None = None,
) -> Path:
    """Sign the archived ``pdf`` into a new indexed copy beside it; return the copy's path."""
    from .sign import check_signatures, sign_report

    root = Path(root).resolve()
    study_id, revision, original = _archived_report(pdf, root)
    with tempfile.TemporaryDirectory(prefix="reportgen-sign-") as tmp:
        signed = sign_report(
            pdf,
            key=key,
            cert=cert,
            passphrase=passphrase,
            output=Path(tmp) / "signed.pdf",
            reason=reason,
            location=location,
        )
        data = signed.read_bytes()
    checks = check_signatures(data)
    last = checks[-1] if checks else None
    folder = root / study_id / SIGNED_FOLDER
    folder.mkdir(exist_ok=True)
    stem = Path(original).stem
    conn = _connect(root)
    try:
        k = 1
        while True:
            target = folder / f"{stem}-signed-{k}.pdf"
            try:
                fd = os.open(target, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o444)
            except FileExistsError:
                k += 1
                continue
            break
        try:
            with os.fdopen(fd, "wb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
        except BaseException:
            os.chmod(target, 0o644)
            target.unlink(missing_ok=True)
            raise
        stamp = (now or dt.datetime.now(dt.UTC)).astimezone(dt.UTC).replace(microsecond=0)
        conn.execute("BEGIN IMMEDIATE")
        conn.execute(
            "INSERT INTO signed_copies (study_id, revision, file, sha256, original, signer, "
            "signed_at, archived_at) VALUES (?, ?, ?, ?, ?, ?, ?, ?)",
            (
                study_id,
                revision,
                target.relative_to(root).as_posix(),
                hashlib.sha256(data).hexdigest(),
                original,
                last.signer if last else None,
                last.signed_at if last else None,
                stamp.strftime("%Y-%m-%dT%H:%M:%SZ"),
            ),
        )
        conn.execute("COMMIT")
    finally:
        conn.close()
    return target
