"""What the archive trusts: files that match what the tool hashed, and nothing else.

* :func:`check_built_folder` — before ``archive`` copies a built revision folder: the folder's
  ``SHA256SUMS`` (written by ``build``) must list every file with its SHA-256, the report PDF's
  build record must list the HTML, results.json and charts with the same SHA-256 (so an edited
  HTML or a manifest rewritten to match is refused, the file named), the build record and the
  PDF's document information must say ``release`` (drafts are refused by that record, never by a
  text search), and nothing may be appended to the PDF.  A signed copy of the report
  (``<stem>-signed.pdf``: the built PDF's bytes followed by signature updates) may lie beside it.
* :func:`recheck_entry` — for ``history``, ``register`` and ``verify --archive``: the files of an
  archived revision against the SHA-256 values of the index; which differ, are missing or extra.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

from .buildrecord import MANIFEST_NAME, RECORD_NAME, STATE_DRAFT, STATE_KEY, parse_record
from .errors import InputError


def _refuse(path: Path, message: str, hint: str | None = None) -> InputError:
    return InputError.single(
        path, message, hint=hint or "rebuild the revision; do not archive a changed report"
    )


def check_built_folder(
    path: Path, files: dict[str, str], pdf: Path, attachments: dict[str, bytes]
) -> dict[str, str]:
    """Check a built revision folder (see the module docstring); return the files to archive.

    ``files`` is every file of the folder (relative path -> SHA-256, as hashed now).
    Raises InputError naming the file that does not match.
    """
    manifest_path = path / MANIFEST_NAME
    if not manifest_path.is_file():
        raise _refuse(
            path,
            f"no {MANIFEST_NAME} here: build writes the SHA-256 of every file it writes into the "
            "revision folder, and only such a folder is archived",
            hint="build the revision again with this reportgen, then archive it",
        )
    from .buildrecord import parse_manifest

    try:
        manifest = parse_manifest(manifest_path.read_text(encoding="utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise _refuse(manifest_path, f"cannot be read: {exc}") from None
    for rel, digest in sorted(manifest.items()):
        if rel not in files:
            raise _refuse(path / rel, f"listed in {MANIFEST_NAME} but missing from the folder")
        if files[rel] != digest:
            raise _refuse(
                path / rel,
                f"{rel}: the folder no longer matches the manifest written by build (edited "
                "after build: its SHA-256 differs)",
            )
    # the build record inside the PDF: the state, and the SHA-256 of every file beside the PDF
    if RECORD_NAME not in attachments:
        raise _refuse(
            pdf,
            f"the report PDF carries no build record ({RECORD_NAME}); it was built by an older "
            "reportgen or changed after build",
            hint="build the revision again with this reportgen, then archive it",
        )
    try:
        record = parse_record(attachments[RECORD_NAME])
    except ValueError as exc:
        raise _refuse(pdf, f"edited build record: {exc}") from None
    meta_state = _pdf_state(pdf)
    if record.state == STATE_DRAFT or meta_state == STATE_DRAFT:
        raise InputError.single(
            pdf,
            "this is a draft (built with --replace; its build record says so); drafts are not "
            "archived",
            hint="raise study.revision in the study definition and build again",
        )
    if meta_state != record.state:
        raise _refuse(
            pdf,
            f"the PDF's document information says the state is {meta_state or '(none)'}, its "
            f"build record says {record.state}",
        )
    for rel, digest in sorted(record.files.items()):
        if files.get(rel) != digest:
            what = "missing from the folder" if rel not in files else "edited after build"
            raise _refuse(
                path / rel,
                f"{rel}: {what}: its SHA-256 is not the one the report PDF's build record holds",
            )
    pdf_rel = pdf.relative_to(path).as_posix()
    if manifest.get(pdf_rel) != files.get(pdf_rel):
        raise _refuse(pdf, f"{pdf_rel} is not listed in {MANIFEST_NAME} with its SHA-256")
    from .pdftail import appended_problems, original_end

    data = pdf.read_bytes()
    end = original_end(data)
    problems = appended_problems(data, end, signed=False)
    if problems:
        raise _refuse(pdf, f"content was added to the report after it was built: {problems[0]}")
    out = {rel: h for rel, h in files.items() if rel in manifest or rel == MANIFEST_NAME}
    for rel in sorted(set(files) - set(manifest) - {MANIFEST_NAME}):
        if _is_signed_copy(path / rel, data):
            out[rel] = files[rel]
            continue
        raise _refuse(
            path / rel,
            f"{rel} was not written by build (it is not in {MANIFEST_NAME}); only the files build "
            "wrote, and signed copies of the report, are archived",
            hint="move the file out of the revision folder, or rebuild the revision",
        )
    return dict(sorted(out.items()))


def _pdf_state(pdf: Path) -> str | None:
    import pypdf

    try:
        meta = pypdf.PdfReader(str(pdf)).metadata or {}
    except Exception:  # noqa: BLE001 - the attachments were read already; a damaged file says None
        return None
    value = meta.get("/" + STATE_KEY)
    return None if value is None else str(value)


def _is_signed_copy(path: Path, built: bytes) -> bool:
    """A signed copy: the built PDF's bytes, then only signature updates a signature covers."""
    if path.suffix.lower() != ".pdf" or path.is_symlink() or not path.is_file():
        return False
    data = path.read_bytes()
    if not data.startswith(built) or len(data) == len(built):
        return False
    from .pdftail import appended_problems
    from .sigcheck import check_signatures

    if appended_problems(data, len(built), signed=True):
        return False
    checks = check_signatures(data)
    return bool(checks) and all(c.intact and c.valid for c in checks) and checks[-1].whole_file


def recheck_entry(root: Path, entry: Any) -> list[str]:
    """The archived files of ``entry`` that no longer match the index: '<file>: why'."""
    from .buildrecord import ENTRY_NAME, sha256_file

    folder = Path(root) / entry.folder
    if not folder.is_dir():
        return [f"{entry.folder}: the archived folder is missing"]
    out = []
    for rel, digest in sorted(entry.files.items()):
        p = folder / rel
        if p.is_symlink() or not p.is_file():
            out.append(f"{entry.folder}/{rel}: missing")
        elif sha256_file(p) != digest:
            out.append(f"{entry.folder}/{rel}: changed (its SHA-256 is not the one in the index)")
    present = {
        p.relative_to(folder).as_posix() for p in folder.rglob("*") if p.is_file() or p.is_symlink()
    }
    for rel in sorted(present - set(entry.files) - {ENTRY_NAME}):
        out.append(f"{entry.folder}/{rel}: added after archiving")
    entry_file = folder / ENTRY_NAME
    try:
        written = json.loads(entry_file.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        written = None
    if written != json.loads(json.dumps(entry.__dict__)):
        out.append(f"{entry.folder}/{ENTRY_NAME}: does not match the index")
    return out


def recheck_all(root: Path, entries: list[Any]) -> list[str]:
    out: list[str] = []
    for e in entries:
        out += recheck_entry(root, e)
    return out


def format_differences(differences: list[str], *, limit: int = 20) -> str:
    lines = differences[:limit]
    if len(differences) > limit:
        lines.append(f"… and {len(differences) - limit} more")
    return "\n  ".join(lines)


def check_archive_files(root: Path, entries: list[Any]) -> None:
    """For ``history`` and ``register``: raise CheckFailed naming every archived file that no
    longer matches the index (after the command's own output was printed or written)."""
    from .errors import CheckFailed

    differences = recheck_all(root, entries)
    if differences:
        raise CheckFailed(
            f"{len(differences)} archived file(s) differ from the SHA-256 values of the index; "
            "what they say cannot be relied on:\n  " + format_differences(differences)
        )


def archive_summary(root: Path, entries: list[Any], report: Path | None) -> tuple[bool, list[str]]:
    """For ``verify --archive``: (every archived file of ``entries`` matches, lines to print)."""
    import hashlib

    differences = recheck_all(root, entries)
    files = sum(len(e.files) for e in entries)
    lines = []
    if differences:
        lines.append(
            f"archive {root}: NOT INTACT — {len(differences)} of the {files} archived file(s) of "
            f"{len(entries)} revision(s) differ from the index:"
        )
        lines += [f"  FAIL  {d}" for d in differences]
    else:
        lines.append(
            f"archive {root}: intact — all {files} archived file(s) of {len(entries)} revision(s) "
            "have the SHA-256 of the index"
        )
    if report is not None and report.is_file():
        digest = hashlib.sha256(report.read_bytes()).hexdigest()
        found = [(e, rel) for e in entries for rel, h in sorted(e.files.items()) if h == digest]
        if found:
            e, rel = found[0]
            lines.append(
                f"  {report.name} is archived: {e.folder}/{rel} ({e.study_id} revision "
                f"{e.revision}, archived {e.archived_at})"
            )
        else:
            lines.append(
                f"  {report.name} is not in the archive (no archived file has its SHA-256)"
            )
    return not differences, lines
