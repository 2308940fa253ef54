"""The archive: built report revisions kept unaltered, with an SQLite index.

Layout (``ARCHIVE`` is ``--archive``, else ``$REPORTGEN_ARCHIVE``, else ``archive/`` in the
folder that holds ``output/``, i.e. beside ``studies/``)::

    ARCHIVE/
      index.sqlite                       # one row per archived revision
      <study-id>/
        rev<N>/                          # read-only copy of output/<study-id>/rev<N>/
          <study-id>-rev<N>.pdf, .html, results.json, charts ...
          archive-entry.json             # the index row, so the folder describes itself

How an entry is made, so that a crash never leaves half of one:

1. every file is copied into a hidden sibling ``<study-id>/.partial-rev<N>-<host>-<pid>-<token>``,
   checked against its SHA-256, made read-only and fsynced;
2. under an SQLite write lock (``BEGIN IMMEDIATE``) the sibling is renamed to ``rev<N>`` (one
   atomic ``rename``) and the row is inserted; the transaction commits.

A process killed during 1 leaves only a hidden partial folder, which the next ``archive`` run
removes (when its process is gone) and everything else ignores.  A process killed between the
rename and the commit leaves a complete folder with its ``archive-entry.json`` but no row; the
next ``archive`` run checks that folder's hashes and inserts the row (roll forward).  Rows can
be neither updated nor deleted (SQLite triggers refuse it); folders are never overwritten.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import json
import os
import re
import secrets
import shutil
import socket
import sqlite3
import stat
import sys
import time
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .buildrecord import ENTRY_NAME, sha256_file
from .errors import ExistsError, InputError

ENV_ARCHIVE = "REPORTGEN_ARCHIVE"
#: test hook only: "copy:SECONDS" sleeps after the first copied file, "commit:SECONDS" sleeps
#: after the rename and before the commit.  Used by the crash tests; never set it otherwise.
ENV_TEST_PAUSE = "REPORTGEN_TEST_ARCHIVE_PAUSE"
#: test hook only: the name of a step after which the process ends at once (``os._exit``), as
#: if killed: "pending", "copy", "entry", "rename", "insert", "done".  Never set it otherwise.
ENV_TEST_KILL = "REPORTGEN_TEST_ARCHIVE_KILL"
KILL_STEPS = ("pending", "copy", "entry", "rename", "insert", "done")

INDEX_NAME = "index.sqlite"
SCHEMA_VERSION = 1
PARTIAL_PREFIX = ".partial-"
_REV_RE = re.compile(r"^rev([1-9][0-9]*)$")
_ID_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")

#: The panel figures kept in the index (path in the results JSON).
PANEL_FIGURES: tuple[str, ...] = (
    "reproducibility.agreement",
    "reproducibility.fleiss_kappa",
    "reproducibility.krippendorff_alpha",
    "reproducibility.gwet_ac1",
    "reproducibility.kendall_w",
    "panel_accuracy.agreement",
    "panel_accuracy.effectiveness",
    "panel_accuracy.miss_rate",
    "panel_accuracy.false_alarm_rate",
)
#: The per-rater figures kept in the index (``section.measure`` under ``section.<rater>``).
RATER_FIGURES: tuple[str, ...] = (
    "repeatability.agreement",
    "repeatability.fleiss_kappa",
    "accuracy.agreement",
    "accuracy.effectiveness",
    "accuracy.cohen_kappa",
    "accuracy.weighted_kappa",
    "accuracy.miss_rate",
    "accuracy.false_alarm_rate",
)
_RECORD_KEYS = ("estimate", "ci_low", "ci_high", "ci_method", "items", "agreeing")

SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS revisions (
    id               INTEGER PRIMARY KEY,
    study_id         TEXT    NOT NULL,
    revision         INTEGER NOT NULL CHECK (revision >= 1),
    title            TEXT,
    study_date       TEXT,             -- ISO date of the study (certification date), or NULL
    characteristic   TEXT,
    station          TEXT,
    scale            TEXT,
    verdict          TEXT,             -- PASS | IMPROVE | NULL (no criteria)
    figures          TEXT    NOT NULL, -- JSON: {"panel": {path: M}, "raters": {id: {path: M}}}
    certification    TEXT    NOT NULL, -- JSON: {rater id: {name, outcome, certified_on, valid_until}}
    items            TEXT    NOT NULL, -- JSON: sorted item ids
    item_set_sha256  TEXT    NOT NULL, -- SHA-256 of the sorted item ids, one per line
    files            TEXT    NOT NULL, -- JSON: {relative path: SHA-256}
    inputs           TEXT    NOT NULL, -- JSON: {role: SHA-256} of the attached inputs
    software_version TEXT,             -- reportgen version that built the report
    archiver_version TEXT    NOT NULL, -- reportgen version that archived it
    archived_at      TEXT    NOT NULL, -- UTC, ISO 8601 with Z
    folder           TEXT    NOT NULL, -- relative to the archive root
    UNIQUE (study_id, revision)
);
CREATE TABLE IF NOT EXISTS pending (
    folder     TEXT PRIMARY KEY,       -- <study-id>/rev<N>, relative to the archive root
    partial    TEXT NOT NULL,          -- the hidden copy's name, <study-id>/.partial-…
    entry      TEXT NOT NULL,          -- JSON: the index row to insert once the folder is in place
    started_at TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS revisions_by_characteristic ON revisions (characteristic, station);
CREATE TRIGGER IF NOT EXISTS revisions_read_only_update BEFORE UPDATE ON revisions
BEGIN SELECT RAISE(ABORT, 'archived revisions are read-only'); END;
CREATE TRIGGER IF NOT EXISTS revisions_read_only_delete BEFORE DELETE ON revisions
BEGIN SELECT RAISE(ABORT, 'archived revisions are never deleted'); END;
"""

_COLUMNS = (
    "study_id",
    "revision",
    "title",
    "study_date",
    "characteristic",
    "station",
    "scale",
    "verdict",
    "figures",
    "certification",
    "items",
    "item_set_sha256",
    "files",
    "inputs",
    "software_version",
    "archiver_version",
    "archived_at",
    "folder",
)
_JSON_COLUMNS = frozenset({"figures", "certification", "items", "files", "inputs"})


# --------------------------------------------------------------------------- locations


def resolve_archive_dir(
    explicit: str | Path | None = None,
    *,
    revision_dir: Path | None = None,
    study_path: Path | None = None,
) -> Path:
    """Where the archive is: ``explicit``, else ``$REPORTGEN_ARCHIVE``, else a default.

    The default is ``archive/`` in the project folder: the folder that holds ``output/``
    (for ``output/<id>/rev<N>``) or ``studies/`` (for ``studies/<name>/study.yaml``); with
    neither known, ``./archive``.
    """
    if explicit:
        return Path(explicit).expanduser().resolve()
    env = os.environ.get(ENV_ARCHIVE)
    if env:
        return Path(env).expanduser().resolve()
    if revision_dir is not None:
        parents = Path(revision_dir).resolve().parents
        if len(parents) >= 3:
            return parents[2] / "archive"
    if study_path is not None:
        parents = Path(study_path).resolve().parents
        if len(parents) >= 3:
            return parents[2] / "archive"
    return Path.cwd().resolve() / "archive"


# --------------------------------------------------------------------------- hashing


def sha256_bytes(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def item_set_digest(items: list[str]) -> str:
    return sha256_bytes("".join(f"{i}\n" for i in sorted(items)).encode("utf-8"))


# --------------------------------------------------------------------------- the built revision


@dataclass(frozen=True)
class BuiltRevision:
    """A built revision folder (``output/<study-id>/rev<N>``), read and checked."""

    path: Path
    study_id: str
    revision: int
    results: dict[str, Any]
    pdf: Path
    files: dict[str, str]  # relative posix path -> SHA-256
    inputs: dict[str, str]  # attachment name -> SHA-256 (inputs embedded in the PDF)
    facts: dict[str, Any]  # title, date, characteristic, station, scale, raters {id: name}


def _study_yaml_facts(data: bytes, where: str) -> dict[str, Any]:
    """The few keys the archive needs from an attached study definition (no aliases)."""
    import yaml

    class _Loader(yaml.SafeLoader):
        def compose_node(self, parent: Any, index: Any) -> Any:
            if self.check_event(yaml.AliasEvent):
                raise yaml.YAMLError("aliases are not allowed in a study definition")
            return super().compose_node(parent, index)

    if len(data) > 2_000_000:
        raise InputError.single(where, "the attached study definition is larger than 2 MB")
    try:
        doc = yaml.load(data.decode("utf-8-sig"), Loader=_Loader)  # noqa: S506 - safe subclass
    except (yaml.YAMLError, UnicodeDecodeError) as exc:
        raise InputError.single(
            where, f"the attached study definition cannot be read: {exc}"
        ) from None
    if not isinstance(doc, dict):
        raise InputError.single(where, "the attached study definition is not a mapping")
    study = doc.get("study") if isinstance(doc.get("study"), dict) else {}
    raters = {}
    for r in doc.get("raters") or []:
        if isinstance(r, dict) and r.get("id") is not None:
            raters[str(r["id"])] = str(r.get("name") or r["id"])
    cert = doc.get("certification") if isinstance(doc.get("certification"), dict) else {}
    date = study.get("date")
    return {
        "id": None if study.get("id") is None else str(study.get("id")),
        "revision": study.get("revision", 1),
        "title": study.get("title"),
        "date": date.isoformat() if isinstance(date, dt.date) else (str(date) if date else None),
        "characteristic": study.get("characteristic"),
        "station": study.get("station"),
        "scale": doc.get("scale"),
        "raters": raters,
        "valid_months": cert.get("valid_months"),
    }


def _results_study_facts(results: dict[str, Any]) -> dict[str, Any]:
    s = results.get("study") if isinstance(results.get("study"), dict) else {}
    raters: dict[str, str] = {}
    rs = s.get("raters")
    if isinstance(rs, list):
        for r in rs:
            if isinstance(r, dict) and r.get("id") is not None:
                raters[str(r["id"])] = str(r.get("name") or r["id"])
    elif isinstance(rs, dict):
        raters = {str(k): str(v) for k, v in rs.items()}
    return {
        "title": s.get("title"),
        "date": s.get("date"),
        "characteristic": s.get("characteristic"),
        "station": s.get("station"),
        "scale": (results.get("design") or {}).get("scale")
        if isinstance(results.get("design"), dict)
        else None,
        "raters": raters,
    }


def read_built_revision(revision_dir: str | Path) -> BuiltRevision:
    """Read and check a built revision folder; raises InputError naming what is wrong."""
    from .pdfread import read_attachments

    path = Path(revision_dir)
    if not path.is_dir():
        raise InputError.single(
            path, "not a folder; give a built revision such as output/<study-id>/rev<N>"
        )
    m = _REV_RE.match(path.name)
    results_path = path / "results.json"
    if not results_path.is_file():
        raise InputError.single(
            path,
            "no results.json here; this is not a built revision folder",
            hint="run `reportgen build STUDY.yaml` first and archive output/<study-id>/rev<N>",
        )
    try:
        results = json.loads(results_path.read_text(encoding="utf-8"))
    except (OSError, ValueError) as exc:
        raise InputError.single(results_path, f"cannot be read as JSON: {exc}") from None
    if not isinstance(results, dict) or not isinstance(results.get("study"), dict):
        raise InputError.single(results_path, "no 'study' block; not a reportgen results file")
    study_id = str(results["study"].get("id") or "")
    revision = results["study"].get("revision")
    if not _ID_RE.match(study_id) or not isinstance(revision, int) or revision < 1:
        raise InputError.single(
            results_path, "study.id / study.revision missing or invalid", key="study"
        )
    if m is None or int(m.group(1)) != revision or path.resolve().parent.name != study_id:
        raise InputError.single(
            path,
            f"folder name does not match results.json (study {study_id!r}, revision {revision})",
            hint=f"archive the folder output/{study_id}/rev{revision} as built",
        )
    files: dict[str, str] = {}
    for p in sorted(path.rglob("*")):
        rel = p.relative_to(path).as_posix()
        if p.is_symlink():
            raise InputError.single(
                p, "symbolic links are not archived; the folder must hold plain files"
            )
        if p.is_file():
            if rel == ENTRY_NAME:
                raise InputError.single(p, f"{ENTRY_NAME} is reserved for the archive")
            files[rel] = sha256_file(p)
        elif not p.is_dir():
            raise InputError.single(
                p,
                "a special file (FIFO, device or socket) is not archived; the folder must hold plain files",
            )
    pdf_name = f"{study_id}-rev{revision}.pdf"
    pdf = path / pdf_name
    if not pdf.is_file():
        pdfs = sorted(path.glob("*.pdf"))
        if len(pdfs) != 1:
            raise InputError.single(path, f"no report PDF ({pdf_name}) in the folder")
        pdf = pdfs[0]
    attachments = read_attachments(pdf)
    attached = attachments.get("results.json")
    if attached is None:
        raise InputError.single(
            pdf,
            "the report PDF carries no results.json attachment; it cannot be archived",
            hint="build the revision again with `reportgen build`",
        )
    if attached != results_path.read_bytes():
        raise InputError.single(
            results_path,
            "differs from the results.json attached to the report PDF: the folder was changed after build",
            hint="rebuild the revision; do not archive a changed report",
        )
    from .archivecheck import check_built_folder
    from .pdfread import GENERATED_ATTACHMENTS

    files = check_built_folder(path, files, pdf, attachments)
    inputs = {
        name: sha256_bytes(data)
        for name, data in attachments.items()
        if name not in GENERATED_ATTACHMENTS
    }
    facts = _results_study_facts(results)
    yaml_names = [n for n in attachments if n.lower().endswith((".yaml", ".yml"))]
    if yaml_names:
        yfacts = _study_yaml_facts(attachments[yaml_names[0]], f"{pdf}#{yaml_names[0]}")
        for k, v in yfacts.items():
            if facts.get(k) in (None, {}, "") and v not in (None, {}, ""):
                facts[k] = v
    return BuiltRevision(path, study_id, revision, results, pdf, files, inputs, facts)


# --------------------------------------------------------------------------- figures


def _record(value: Any) -> dict[str, Any] | None:
    if isinstance(value, dict) and "estimate" in value:
        return {k: value.get(k) for k in _RECORD_KEYS}
    return None


def main_figures(results: dict[str, Any]) -> dict[str, Any]:
    """The figures kept in the index: panel measures and per-rater measures, with intervals."""
    panel: dict[str, Any] = {}
    for path in PANEL_FIGURES:
        section, measure = path.split(".")
        rec = _record((results.get(section) or {}).get(measure))
        if rec is not None:
            panel[path] = rec
    raters: dict[str, dict[str, Any]] = {}
    for path in RATER_FIGURES:
        section, measure = path.split(".")
        block = results.get(section) or {}
        if not isinstance(block, dict):
            continue
        for rater, measures in block.items():
            if isinstance(measures, dict):
                rec = _record(measures.get(measure))
                if rec is not None:
                    raters.setdefault(str(rater), {})[path] = rec
    design = results.get("design") if isinstance(results.get("design"), dict) else {}
    level = design.get("confidence_level", design.get("confidence"))
    return {"confidence_level": level, "panel": panel, "raters": raters}


def item_ids(results: dict[str, Any]) -> list[str]:
    out: list[str] = []
    for it in results.get("items") or []:
        if isinstance(it, dict):
            v = it.get("item", it.get("id"))
            if v is not None:
                out.append(str(v))
        elif isinstance(it, str | int):
            out.append(str(it))
    return sorted(set(out))


_CERTIFIED_WORDS = {"certified", "pass", "passed", "meets", "yes", "true", "qualified"}


def _outcome(value: Any) -> str:
    if isinstance(value, bool):
        return "certified" if value else "not certified"
    if isinstance(value, str) and value.strip().lower() in _CERTIFIED_WORDS:
        return "certified"
    return "not certified"


def _absent_raters(results: dict[str, Any]) -> set[str]:
    """Raters with every rating slot empty (possible with ``missing: allow``)."""
    design = results.get("design") if isinstance(results.get("design"), dict) else {}
    caveats = results.get("caveats") if isinstance(results.get("caveats"), dict) else {}
    missing = caveats.get("missing") if isinstance(caveats.get("missing"), dict) else {}
    by_rater = missing.get("by_rater") if isinstance(missing.get("by_rater"), dict) else {}
    items, trials = design.get("items"), design.get("trials")
    if not isinstance(items, int) or not isinstance(trials, int) or items * trials == 0:
        return set()
    return {str(r) for r, n in by_rater.items() if n == items * trials}


def certification_summary(results: dict[str, Any], facts: dict[str, Any]) -> dict[str, Any]:
    """Per-inspector certification, from the verdict's ``certification`` block.

    Returns ``{rater id: {name, outcome, assessed_on, certified_on, valid_until,
    due_window_days}}``; empty when the study has no certification rules.
    """
    cert = results.get("certification")
    if not isinstance(cert, dict):
        return {}
    inspectors = cert.get("inspectors")
    if not isinstance(inspectors, list):
        return {}
    names: dict[str, str] = facts.get("raters") or {}
    study_date = cert.get("study_date") or facts.get("date")
    months = (
        cert.get("valid_months") if isinstance(cert.get("valid_months"), int) else 12
    )  # verdict's default
    window = cert.get("due_window_days")
    window = window if isinstance(window, int) else 30  # verdict.DEFAULT_DUE_WINDOW_DAYS
    out: dict[str, Any] = {}
    absent = _absent_raters(results)
    for v in inspectors:
        if not isinstance(v, dict) or v.get("rater") is None:
            continue
        rid = str(v["rater"])
        if rid in absent:  # gave no rating: took no part, so this study says nothing of them
            continue
        outcome = _outcome(v.get("outcome"))
        certified_on = v.get("certified_on") if outcome == "certified" else None
        if outcome == "certified" and not certified_on:
            certified_on = study_date
        until = v.get("valid_until") if outcome == "certified" else None
        if outcome == "certified" and not until and certified_on:
            from .verdict import valid_until  # imports numpy: only when the verdict left it out

            with contextlib.suppress(ValueError):
                until = valid_until(dt.date.fromisoformat(str(certified_on)), months).isoformat()
        out[rid] = {
            "name": str(v.get("name") or names.get(rid) or rid),
            "outcome": outcome,
            "assessed_on": str(study_date) if study_date else None,
            "certified_on": str(certified_on) if certified_on else None,
            "valid_until": str(until) if until else None,
            "due_window_days": window,
        }
    return out


def software_version(results: dict[str, Any]) -> str | None:
    for block in ("provenance", "software", "build"):
        b = results.get(block)
        if isinstance(b, dict):
            for key in ("software_version", "reportgen", "version"):
                if isinstance(b.get(key), str):
                    return b[key]
        elif isinstance(b, str):
            return b
    v = results.get("software_version")
    return v if isinstance(v, str) else None


def _built_with(pdf: Path) -> str | None:
    """The reportgen version in the report PDF's attached build record, or None."""
    from .buildrecord import RECORD_NAME, parse_record
    from .pdfread import read_attachments

    data = read_attachments(pdf).get(RECORD_NAME)
    if data is None:
        return None
    try:
        return parse_record(data).version("reportgen")
    except ValueError:
        return None


# --------------------------------------------------------------------------- the index


@dataclass(frozen=True)
class ArchiveEntry:
    """One row of the index, JSON columns decoded."""

    study_id: str
    revision: int
    title: str | None
    study_date: str | None
    characteristic: str | None
    station: str | None
    scale: str | None
    verdict: str | None
    figures: dict[str, Any]
    certification: dict[str, Any]
    items: list[str]
    item_set_sha256: str
    files: dict[str, str]
    inputs: dict[str, str]
    software_version: str | None
    archiver_version: str
    archived_at: str
    folder: str

    def as_row(self) -> dict[str, Any]:
        return {
            c: json.dumps(getattr(self, c), sort_keys=True)
            if c in _JSON_COLUMNS
            else getattr(self, c)
            for c in _COLUMNS
        }

    @classmethod
    def from_row(cls, row: dict[str, Any] | sqlite3.Row) -> ArchiveEntry:
        d = {c: row[c] for c in _COLUMNS}
        for c in _JSON_COLUMNS:
            d[c] = json.loads(d[c])
        return cls(**d)


def _connect(db: Path) -> sqlite3.Connection:
    conn = sqlite3.connect(str(db), timeout=60.0, isolation_level=None)
    conn.row_factory = sqlite3.Row
    conn.execute("PRAGMA busy_timeout = 60000")
    conn.execute("PRAGMA foreign_keys = ON")
    return conn


@contextlib.contextmanager
def _write_transaction(conn: sqlite3.Connection) -> Iterator[None]:
    conn.execute("BEGIN IMMEDIATE")
    try:
        yield
    except BaseException:
        conn.execute("ROLLBACK")
        raise
    conn.execute("COMMIT")


def open_index(root: Path, *, create: bool) -> sqlite3.Connection:
    """Open ``root/index.sqlite``; with ``create`` make the folder, file and schema."""
    db = root / INDEX_NAME
    if not db.is_file():
        if not create:
            raise InputError.single(
                root,
                "no archive here (no index.sqlite)",
                hint="archive a built revision first, or give --archive / REPORTGEN_ARCHIVE",
            )
        root.mkdir(parents=True, exist_ok=True)
    conn = _connect(db)
    if create:
        try:
            with _write_transaction(conn):
                for stmt in _split_sql(SCHEMA):
                    conn.execute(stmt)
                conn.execute(
                    "INSERT OR IGNORE INTO meta(key, value) VALUES ('schema_version', ?)",
                    (str(SCHEMA_VERSION),),
                )
        except sqlite3.DatabaseError as exc:
            conn.close()
            if isinstance(exc, sqlite3.OperationalError):  # locked, read-only …: not a damaged file
                raise
            raise InputError.single(db, f"not a reportgen archive index: {exc}") from None
    try:
        row = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    except sqlite3.DatabaseError as exc:
        conn.close()
        raise InputError.single(db, f"not a reportgen archive index: {exc}") from None
    if row is None or int(row["value"]) > SCHEMA_VERSION:
        conn.close()
        raise InputError.single(db, "archive index written by a newer reportgen; upgrade reportgen")
    return conn


def _split_sql(script: str) -> list[str]:
    """Split the schema into statements (triggers contain ';' inside BEGIN … END)."""
    out, buf = [], []
    for line in script.strip().splitlines():
        buf.append(line)
        text = "\n".join(buf).strip()
        if text.endswith(";") and (
            not text.upper().startswith("CREATE TRIGGER") or text.upper().endswith("END;")
        ):
            out.append(text)
            buf = []
    return out


def list_entries(
    root: str | Path,
    *,
    characteristic: str | None = None,
    station: str | None = None,
    study_id: str | None = None,
) -> list[ArchiveEntry]:
    """Archived revisions, oldest first (study date, then study id, revision, archived-at)."""
    conn = open_index(Path(root), create=False)
    try:
        with damaged_index(Path(root)):
            return _list_entries(conn, characteristic, station, study_id)
    finally:
        conn.close()


@contextlib.contextmanager
def damaged_index(root: Path) -> Iterator[None]:
    """Turn a damaged index (a corrupted page, a row that does not decode) into InputError."""
    try:
        yield
    except sqlite3.OperationalError as exc:
        if "locked" in str(exc) or "busy" in str(exc):
            raise
        raise InputError.single(
            root / INDEX_NAME,
            f"the archive index cannot be read: {exc}",
            hint="restore index.sqlite from a backup; the archived folders are unchanged",
        ) from None
    except (sqlite3.DatabaseError, ValueError, TypeError, KeyError) as exc:
        raise InputError.single(
            root / INDEX_NAME,
            f"the archive index is damaged: {type(exc).__name__}: {exc}",
            hint="restore index.sqlite from a backup; the archived folders are unchanged",
        ) from None


def _list_entries(
    conn: sqlite3.Connection,
    characteristic: str | None,
    station: str | None,
    study_id: str | None,
) -> list[ArchiveEntry]:
    sql = "SELECT * FROM revisions WHERE 1=1"
    args: list[Any] = []
    for col, val in (
        ("characteristic", characteristic),
        ("station", station),
        ("study_id", study_id),
    ):
        if val is not None:
            sql += f" AND {col} = ? COLLATE NOCASE"
            args.append(val)
    rows = conn.execute(sql, args).fetchall()
    entries = [ArchiveEntry.from_row(r) for r in rows]
    return sorted(
        entries,
        key=lambda e: (e.study_date or e.archived_at[:10], e.study_id, e.revision, e.archived_at),
    )


# --------------------------------------------------------------------------- archiving


def _fsync_dir(path: Path) -> None:
    fd = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _test_pause(stage: str) -> None:
    hook = os.environ.get(ENV_TEST_PAUSE, "")
    if hook.startswith(stage + ":"):
        print(f"test pause: {stage}", file=sys.stderr, flush=True)
        time.sleep(float(hook.split(":", 1)[1]))
    if os.environ.get(ENV_TEST_KILL) == stage:
        os._exit(137)  # as if killed: no clean-up, no rollback by Python, open transaction lost


def _make_writable(path: Path) -> None:
    for p in [path, *path.rglob("*")]:
        with contextlib.suppress(OSError):
            if p.is_dir() and not p.is_symlink():
                os.chmod(p, 0o700)


def _remove_partial(path: Path) -> None:
    _make_writable(path)
    shutil.rmtree(path, ignore_errors=True)


def _partial_is_abandoned(name: str) -> bool:
    # .partial-rev<N>-<host>-<pid>-<token>
    parts = name[len(PARTIAL_PREFIX) :].rsplit("-", 2)
    if len(parts) != 3:
        return False
    head, pid_text, _token = parts
    host = head.split("-", 1)[1] if "-" in head else ""
    if host != socket.gethostname() or not pid_text.isdigit():
        return False  # another machine's copy in progress: leave it alone
    pid = int(pid_text)
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:
        return False
    return False


def recover(conn: sqlite3.Connection, root: Path) -> list[str]:
    """Tidy up after interrupted runs; call inside a write transaction.  Returns what was done.

    Only work this tool recorded is completed: a revision folder is indexed only when the index
    holds a pending row for it (written before the copy began) and every file of the folder
    matches that row's SHA-256 values.  An ``archive-entry.json`` alone is never enough.
    """
    done: list[str] = []
    known = {
        (r["study_id"], r["revision"])
        for r in conn.execute("SELECT study_id, revision FROM revisions")
    }
    pending = {r["folder"]: r for r in conn.execute("SELECT * FROM pending")}
    for folder, row in sorted(pending.items()):
        final = root / folder
        partial = root / row["partial"]
        try:
            entry = ArchiveEntry(**json.loads(row["entry"]))
        except (ValueError, TypeError):
            conn.execute("DELETE FROM pending WHERE folder = ?", (folder,))
            continue
        if (entry.study_id, entry.revision) in known:
            conn.execute("DELETE FROM pending WHERE folder = ?", (folder,))
            continue
        if not _partial_is_abandoned(partial.name):
            continue  # another run is still at work on it
        if partial.exists():
            _remove_partial(partial)
            done.append(f"removed interrupted copy {partial.relative_to(root)}")
        if final.is_dir():
            bad = _folder_differences(final, entry)
            if bad:
                done.append(
                    f"ignored {folder}: its files do not match what archive recorded ({'; '.join(bad[:3])})"
                )
                conn.execute("DELETE FROM pending WHERE folder = ?", (folder,))
                continue
            _insert(conn, entry)
            known.add((entry.study_id, entry.revision))
            done.append(
                f"completed the interrupted archiving of {entry.study_id} rev{entry.revision}"
            )
        conn.execute("DELETE FROM pending WHERE folder = ?", (folder,))
    for study_dir in sorted(p for p in root.iterdir() if p.is_dir() and not p.name.startswith(".")):
        for sub in sorted(study_dir.iterdir()):
            rel = sub.relative_to(root).as_posix()
            if sub.name.startswith(PARTIAL_PREFIX) and sub.is_dir():
                if rel not in {r["partial"] for r in pending.values()} and _partial_is_abandoned(
                    sub.name
                ):
                    _remove_partial(sub)
                    done.append(f"removed interrupted copy {rel}")
                continue
            m = _REV_RE.match(sub.name)
            if not m or (study_dir.name, int(m.group(1))) in known or rel in pending:
                continue
            done.append(
                f"ignored {rel}: the index holds no record of archiving it, so it was not made by "
                f"reportgen archive (a {ENTRY_NAME} alone is never indexed)"
            )
    return done


def _folder_differences(folder: Path, entry: ArchiveEntry) -> list[str]:
    """Files of an archived folder that differ from ``entry`` (which the index recorded)."""
    out = []
    present = {
        p.relative_to(folder).as_posix(): p
        for p in folder.rglob("*")
        if p.is_file() or p.is_symlink()
    }
    for rel, digest in sorted(entry.files.items()):
        p = present.get(rel)
        if p is None or p.is_symlink():
            out.append(f"{rel} missing")
        elif sha256_file(p) != digest:
            out.append(f"{rel} changed")
    for rel in sorted(set(present) - set(entry.files) - {ENTRY_NAME}):
        out.append(f"{rel} added")
    try:
        written = json.loads((folder / ENTRY_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        written = None
    if written != json.loads(json.dumps(entry.__dict__)):
        out.append(f"{ENTRY_NAME} differs")
    return out


def _insert(conn: sqlite3.Connection, entry: ArchiveEntry) -> None:
    row = entry.as_row()
    conn.execute(
        f"INSERT INTO revisions ({', '.join(_COLUMNS)}) VALUES ({', '.join('?' for _ in _COLUMNS)})",
        [row[c] for c in _COLUMNS],
    )


def _copy_file(src: Path, dst: Path, expected: str) -> None:
    dst.parent.mkdir(parents=True, exist_ok=True)
    h = hashlib.sha256()
    with open(src, "rb") as fi, open(dst, "xb") as fo:
        for chunk in iter(lambda: fi.read(1 << 20), b""):
            h.update(chunk)
            fo.write(chunk)
        fo.flush()
        os.fsync(fo.fileno())
    if h.hexdigest() != expected or sha256_file(dst) != expected:
        raise InputError.single(
            src, "the file changed while it was being archived; run archive again"
        )
    os.chmod(dst, 0o444)


def _utc_now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def archive_revision(
    revision_dir: str | Path,
    *,
    archive_dir: str | Path,
    now: dt.datetime | None = None,
    progress: Callable[[str], None] | None = None,
) -> ArchiveEntry:
    """Copy a built revision into the archive and index it; refuses to overwrite (ExistsError).

    Steps, each safe to be killed after (``archive`` run again completes the work): a pending
    row is committed; the files are copied into a hidden partial folder and checked; the entry
    file is written; under one write transaction the partial folder is renamed into place, its
    files are checked again against what was hashed, the row is inserted and the pending row
    removed.  Archiving a revision that is archived already with the very same files (a re-run
    after an interruption) returns its entry.
    """

    say = progress or (lambda _msg: None)
    built = read_built_revision(revision_dir)
    root = Path(archive_dir).resolve()
    if Path(revision_dir).resolve().is_relative_to(root):
        raise InputError.single(revision_dir, "this folder is inside the archive already")
    conn = open_index(root, create=True)
    try:
        with damaged_index(root):
            return _archive(conn, root, built, now=now, say=say)
    finally:
        conn.close()


def _archive(
    conn: sqlite3.Connection,
    root: Path,
    built: BuiltRevision,
    *,
    now: dt.datetime | None,
    say: Callable[[str], None],
) -> ArchiveEntry:
    from . import __version__

    with _write_transaction(conn):
        for msg in recover(conn, root):
            say(msg)
    same = _same_as_archived(conn, root, built)
    if same is not None:
        say(f"{built.study_id} rev{built.revision} is archived already with these very files")
        return same
    with _write_transaction(conn):
        _refuse_existing(conn, root, built)
    stamp = (now or _utc_now()).astimezone(dt.UTC).replace(microsecond=0)
    facts = built.facts
    verdict = built.results.get("verdict")
    if isinstance(verdict, dict):
        verdict = verdict.get("outcome", verdict.get("verdict"))
    items = item_ids(built.results)
    entry = ArchiveEntry(
        study_id=built.study_id,
        revision=built.revision,
        title=facts.get("title"),
        study_date=facts.get("date"),
        characteristic=facts.get("characteristic"),
        station=facts.get("station"),
        scale=facts.get("scale"),
        verdict=str(verdict) if verdict is not None else None,
        figures={**main_figures(built.results), "names": dict(facts.get("raters") or {})},
        certification=certification_summary(built.results, facts),
        items=items,
        item_set_sha256=item_set_digest(items),
        files=built.files,
        inputs=built.inputs,
        software_version=software_version(built.results) or _built_with(built.pdf),
        archiver_version=__version__,
        archived_at=stamp.strftime("%Y-%m-%dT%H:%M:%SZ"),
        folder=f"{built.study_id}/rev{built.revision}",
    )
    study_dir = root / built.study_id
    study_dir.mkdir(parents=True, exist_ok=True)
    partial = study_dir / (
        f"{PARTIAL_PREFIX}rev{built.revision}-{socket.gethostname()}-{os.getpid()}-{secrets.token_hex(4)}"
    )
    entry_json = json.dumps(entry.__dict__, indent=2, sort_keys=True) + "\n"
    with _write_transaction(conn):
        _refuse_existing(conn, root, built)
        conn.execute(
            "INSERT INTO pending (folder, partial, entry, started_at) VALUES (?, ?, ?, ?)",
            (entry.folder, partial.relative_to(root).as_posix(), entry_json, entry.archived_at),
        )
    _test_pause("pending")
    partial.mkdir()
    try:
        for n, (rel, digest) in enumerate(built.files.items()):
            _copy_file(built.path / rel, partial / rel, digest)
            say(f"copied {rel}")
            if n == 0:
                _test_pause("copy")
        entry_path = partial / ENTRY_NAME
        entry_path.write_text(entry_json, encoding="utf-8")
        with open(entry_path, "rb") as f:
            os.fsync(f.fileno())
        os.chmod(entry_path, 0o444)
        for d in sorted((p for p in partial.rglob("*") if p.is_dir()), key=lambda p: -len(p.parts)):
            _fsync_dir(d)
            os.chmod(d, 0o555)
        _fsync_dir(partial)
        os.chmod(partial, 0o555)
        _test_pause("entry")
        final = study_dir / f"rev{built.revision}"
        with _write_transaction(conn):
            _refuse_existing(conn, root, built, own_pending=entry.folder)
            os.rename(partial, final)
            _fsync_dir(study_dir)
            _test_pause("rename")
            _test_pause("commit")
            bad = _folder_differences(final, entry)  # after the copy: what was hashed?
            if bad:
                raise InputError.single(
                    final,
                    "the archived copy does not match the files that were checked: "
                    + "; ".join(bad[:5]),
                    hint="run archive again; if it persists, check the disk",
                )
            _insert(conn, entry)
            conn.execute("DELETE FROM pending WHERE folder = ?", (entry.folder,))
            _test_pause("insert")
    except BaseException:
        if partial.exists():
            _remove_partial(partial)
        with contextlib.suppress(sqlite3.Error), _write_transaction(conn):
            conn.execute(
                "DELETE FROM pending WHERE folder = ? AND partial = ?",
                (entry.folder, partial.relative_to(root).as_posix()),
            )
        raise
    _test_pause("done")
    return entry


def _same_as_archived(
    conn: sqlite3.Connection, root: Path, built: BuiltRevision
) -> ArchiveEntry | None:
    """The archived entry of this revision when it holds exactly the built files, else None."""
    row = conn.execute(
        "SELECT * FROM revisions WHERE study_id = ? AND revision = ?",
        (built.study_id, built.revision),
    ).fetchone()
    if row is None:
        return None
    entry = ArchiveEntry.from_row(row)
    if entry.files != built.files:
        return None
    if _folder_differences(root / entry.folder, entry):
        return None
    return entry


def _refuse_existing(
    conn: sqlite3.Connection, root: Path, built: BuiltRevision, *, own_pending: str | None = None
) -> None:
    folder = f"{built.study_id}/rev{built.revision}"
    if own_pending is None:
        busy = conn.execute("SELECT started_at FROM pending WHERE folder = ?", (folder,)).fetchone()
        if busy is not None:
            raise ExistsError(
                f"{built.study_id} rev{built.revision} is being archived by another run (since "
                f"{busy['started_at']}); wait for it, then run archive again"
            )
    row = conn.execute(
        "SELECT archived_at FROM revisions WHERE study_id = ? AND revision = ?",
        (built.study_id, built.revision),
    ).fetchone()
    final = root / built.study_id / f"rev{built.revision}"
    if row is not None:
        raise ExistsError(
            f"{built.study_id} rev{built.revision} is already archived (at {row['archived_at']}) in {final}; "
            "archived revisions are never overwritten — raise study.revision and build again"
        )
    if final.exists():
        raise ExistsError(
            f"{final} exists but is not in the index; it was not made by `reportgen archive` — "
            "move it away by hand after checking it"
        )


def is_read_only(path: Path) -> bool:
    """True when no write bit is set on the path (used by tests and `history`)."""
    return not (path.stat().st_mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH))


def write_output(
    path: str | Path, data: bytes, *, mode: int = 0o644, what: str | None = None
) -> None:
    """Write a user-requested output file whole or not at all (temp sibling, fsync, replace).

    Never inside an archive folder, never over a file reportgen did not write (ExistsError,
    see :mod:`reportgen.outputs`), never onto a device or FIFO (InputError).

    A read-only file (a built or archived report), or any file in a read-only folder or an
    archived revision folder, is never replaced (ExistsError, also when run as root); a path
    that cannot be written is bad usage (InputError naming it), not an internal error.
    """
    import tempfile

    from .outputs import refuse_foreign_file, refuse_inside_archive, refuse_special

    final = Path(path)
    folder = final.parent
    refuse_special(final)
    refuse_inside_archive(final, what or "this output")
    if final.exists() and not is_read_only(final):
        refuse_foreign_file(final)
    if final.exists() and is_read_only(final):
        raise ExistsError(
            f"{final} is read-only (a built or archived report?); it is never overwritten — choose another file"
        )
    if folder.is_dir() and (is_read_only(folder) or (folder / ENTRY_NAME).exists()):
        raise ExistsError(
            f"{folder} is a read-only folder (an archived revision?); nothing is written into it — choose another folder"
        )
    try:
        folder.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{final.name}.", suffix=".part")
    except OSError as exc:
        blocker = next((p for p in (folder, *folder.parents) if p.exists()), None)
        why = (
            f"{blocker} is a file, not a folder"
            if blocker and not blocker.is_dir()
            else (exc.strerror or str(exc))
        )
        raise InputError.single(final, f"cannot write this file: {why}") from None
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, final)
    except OSError as exc:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise InputError.single(final, f"cannot write this file: {exc.strerror or exc}") from None
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(tmp)
        raise
