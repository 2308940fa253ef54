"""The build record: how a report was built, carried inside its PDF so that it can be rebuilt.

``build`` attaches ``build-record.json`` to every report PDF and writes the same state into the
PDF's document information (:data:`STATE_KEY`).  The record holds what a rebuild needs beyond the
attached inputs — the build time, the state (``release`` or ``draft``), the software versions the
report prints, the plan summary shown in its design section and the company templates it was
rendered with — and the SHA-256 of every other file ``build`` wrote beside the PDF (HTML,
results.json, charts).  ``verify`` rebuilds the report from it; ``archive`` reads the state from it
(never from the text of the report) and checks the folder's files against it.

Each revision folder also gets :data:`MANIFEST_NAME`, the SHA-256 of every file ``build`` wrote
there, the PDF included, in the common ``<sha256>  <name>`` line format.

Only the standard library is imported here.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

RECORD_NAME = "build-record.json"
RECORD_SCHEMA = "reportgen-build/1"
MANIFEST_NAME = "SHA256SUMS"
#: the PDF document-information key that holds the state (``release`` or ``draft``)
STATE_KEY = "ReportState"
STATE_RELEASE = "release"
STATE_DRAFT = "draft"
STATES = (STATE_RELEASE, STATE_DRAFT)
#: a company template larger than this is not carried in the record (and the build refuses it)
TEMPLATE_LIMIT = 1_000_000


@dataclass(frozen=True)
class BuildRecord:
    state: str
    generated_at: str  # UTC, ISO 8601 with Z
    software: list[dict[str, str]]
    plan: dict[str, Any] | None = None
    templates: dict[str, str] = field(default_factory=dict)  # company template name -> text
    files: dict[str, str] = field(default_factory=dict)  # other files of the folder -> SHA-256

    @property
    def draft(self) -> bool:
        return self.state == STATE_DRAFT

    def when(self) -> dt.datetime:
        return dt.datetime.fromisoformat(self.generated_at.replace("Z", "+00:00"))

    def version(self, name: str) -> str | None:
        return next((s.get("version") for s in self.software if s.get("name") == name), None)

    def to_bytes(self) -> bytes:
        doc = {
            "schema": RECORD_SCHEMA,
            "state": self.state,
            "generated_at": self.generated_at,
            "software": self.software,
            "plan": self.plan,
            "templates": dict(sorted(self.templates.items())),
            "files": dict(sorted(self.files.items())),
        }
        return (json.dumps(doc, indent=2, ensure_ascii=False, sort_keys=True) + "\n").encode(
            "utf-8"
        )


def parse_record(data: bytes) -> BuildRecord:
    """Read ``build-record.json``; raises ValueError with a sentence when it is not one."""
    try:
        doc = json.loads(data.decode("utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise ValueError(f"{RECORD_NAME} cannot be read: {exc}") from None
    if not isinstance(doc, dict) or doc.get("schema") != RECORD_SCHEMA:
        raise ValueError(f"{RECORD_NAME} is not a reportgen build record ({RECORD_SCHEMA})")
    state = doc.get("state")
    if state not in STATES:
        raise ValueError(f"{RECORD_NAME}: state {state!r} is neither release nor draft")
    when = doc.get("generated_at")
    try:
        dt.datetime.fromisoformat(str(when).replace("Z", "+00:00"))
    except ValueError:
        raise ValueError(f"{RECORD_NAME}: generated_at {when!r} is not a time") from None
    software = doc.get("software")
    templates = doc.get("templates") or {}
    files = doc.get("files") or {}
    plan = doc.get("plan")
    if (
        not isinstance(software, list)
        or not all(isinstance(s, dict) for s in software)
        or not isinstance(templates, dict)
        or not all(isinstance(k, str) and isinstance(v, str) for k, v in templates.items())
        or not isinstance(files, dict)
        or not (plan is None or isinstance(plan, dict))
    ):
        raise ValueError(f"{RECORD_NAME} has entries of the wrong type")
    return BuildRecord(
        state=state,
        generated_at=str(when),
        software=[{str(k): str(v) for k, v in s.items()} for s in software],
        plan=plan,
        templates={str(k): v for k, v in templates.items()},
        files={str(k): str(v) for k, v in files.items()},
    )


def company_templates(folder: Path | None) -> dict[str, str]:
    """The text of every template in a company template folder (regular files only)."""
    if folder is None or not Path(folder).is_dir():
        return {}
    from .templatefiles import regular_template_files

    out = {}
    for path in regular_template_files(Path(folder)):
        data = path.read_bytes()
        if len(data) > TEMPLATE_LIMIT:
            from .errors import InputError

            raise InputError.single(
                path, f"a company template larger than {TEMPLATE_LIMIT:,} bytes is not used"
            )
        out[path.relative_to(folder).as_posix()] = data.decode("utf-8", errors="replace")
    return out


def manifest_bytes(files: Mapping[str, bytes]) -> bytes:
    """``SHA256SUMS``: one ``<sha256>  <name>`` line per file, sorted by name."""
    return "".join(
        f"{hashlib.sha256(data).hexdigest()}  {name}\n" for name, data in sorted(files.items())
    ).encode("utf-8")


def parse_manifest(text: str) -> dict[str, str]:
    """name -> SHA-256 from ``SHA256SUMS`` text; raises ValueError naming the bad line."""
    out: dict[str, str] = {}
    for n, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        parts = line.strip().split(maxsplit=1)
        digest = parts[0].lower() if parts else ""
        if len(parts) != 2 or len(digest) != 64 or any(c not in "0123456789abcdef" for c in digest):
            raise ValueError(f"line {n} is not '<sha256>  <file name>'")
        out[parts[1].lstrip("*").strip()] = digest
    return out


#: The entry file ``archive`` writes into each archived revision folder.
ENTRY_NAME = "archive-entry.json"


def sha256_file(path: Path) -> str:
    """The SHA-256 of a file, read in 1 MiB chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()
