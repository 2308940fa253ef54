"""A report's attached inputs laid out again as files, so that they can be loaded as at build.

Used by ``verify`` (recompute) and by :mod:`reportgen.rebuild` (the byte comparison).
"""

from __future__ import annotations

import contextlib
import posixpath
import tempfile
from collections.abc import Iterator
from pathlib import Path, PurePosixPath
from typing import Any


def _relative_inputs(doc: Any) -> dict[str, str]:
    """Relative paths the study definition names: ratings, reference, key, templates folder."""
    out: dict[str, str] = {}
    if not isinstance(doc, dict):
        return out
    ratings = doc.get("ratings")
    if isinstance(ratings, dict):
        ratings = ratings.get("file")
    for role, value in (
        ("ratings", ratings),
        ("reference", doc.get("reference")),
        ("key", doc.get("key")),
    ):
        if isinstance(value, str) and value:
            out[role] = value
    report = doc.get("report")
    if isinstance(report, dict) and isinstance(report.get("templates"), str):
        out["templates"] = report["templates"]
    return out


def _attachment_names(study_name: str, inputs: dict[str, str]) -> dict[str, str]:
    """The attachment name ``build`` gives each input: its base name, with ``-2``, ``-3`` …
    before the extension when an earlier attachment (study definition, ratings, reference, key,
    in that order) has the same name — as in ``render.build._attachments``."""
    seen = {study_name}
    out: dict[str, str] = {}
    for role in ("ratings", "reference", "key"):
        rel = inputs.get(role)
        if rel is None:
            continue
        base = PurePosixPath(rel.replace("\\", "/")).name
        name, n = base, 2
        while name in seen:
            stem, dot, ext = base.rpartition(".")
            name = f"{stem}-{n}.{ext}" if dot else f"{base}-{n}"
            n += 1
        seen.add(name)
        out[role] = name
    return out


def _replace_value(text: str, parsed: Any, role: str, old: str, new: str) -> str:
    """``text`` with the value of ``role`` (as located by the YAML reader) changed to ``new``."""
    keys = (
        ("ratings", "file")
        if role == "ratings" and isinstance(parsed.data.get("ratings"), dict)
        else (role,)
    )
    loc = parsed.where(keys)
    if loc.line is None:
        raise ValueError(f"cannot locate the {role} path {old!r} in the study definition")
    lines = text.splitlines(keepends=True)
    start = sum(len(x) for x in lines[: loc.line - 1]) + (loc.column or 1) - 1
    at = text.find(old, start)
    if at < 0:
        raise ValueError(
            f"the study definition names its {role} by a path verify cannot follow ({old!r})"
        )
    return text[:at] + new + text[at + len(old) :]


@contextlib.contextmanager
def materialise(
    attachments: dict[str, bytes], study_name: str, *, templates: dict[str, str] | None = None
) -> Iterator[tuple[Path, dict[str, bytes]]]:
    """Write the attachments into a temporary folder laid out as the study definition names them.

    Yields (path of the study definition, the original bytes of each input by role: study,
    ratings, reference, key).  ``templates`` (name -> text, from the build record) fills the
    company template folder.  Raises ``ValueError`` with a sentence when an input the study names
    is missing or named by a path that cannot be followed.
    """
    from .yamlio import parse_yaml

    text = attachments[study_name].decode("utf-8-sig", errors="strict")
    parsed = parse_yaml(text, shown=f"attachment {study_name}")
    doc = parsed.data
    inputs = _relative_inputs(doc)
    sources: dict[str, bytes] = {"study": attachments[study_name]}
    # the inputs may lie above the study's folder (``../data/ratings.csv``): the study definition
    # is placed deep enough in the temporary folder that every such path stays inside it
    up = 0
    for rel in inputs.values():
        parts = PurePosixPath(posixpath.normpath(rel.replace("\\", "/"))).parts
        up = max(up, next((i for i, part in enumerate(parts) if part != ".."), len(parts)))
    with tempfile.TemporaryDirectory(prefix="reportgen-verify-") as tmp:
        root = Path(tmp)
        home = root.joinpath(*(["in"] * up))
        home.mkdir(parents=True, exist_ok=True)
        study_path = home / study_name
        by_base = {PurePosixPath(n).name: n for n in attachments}
        by_role = _attachment_names(study_name, inputs)
        for role, rel in inputs.items():
            written = rel.replace("\\", "/")
            if Path(rel).expanduser().is_absolute():
                # an absolute path names a file on the machine that built the report; read the
                # attached copy instead, by pointing the temporary study definition at it
                written = f"absolute/{role}/{PurePosixPath(written).name}"
                text = _replace_value(text, parsed, role, rel, written)
            target = Path(posixpath.normpath(home / written))
            if "\0" in written or not target.is_relative_to(root):
                raise ValueError(
                    f"the study definition names its {role} by a path verify cannot follow ({rel!r}); "
                    "verify recomputes only from the attached files"
                )
            target.parent.mkdir(parents=True, exist_ok=True)
            if role == "templates":
                target.mkdir(parents=True, exist_ok=True)
                for name, body in sorted((templates or {}).items()):
                    t = Path(posixpath.normpath(target / name))
                    if not t.is_relative_to(target):
                        raise ValueError(
                            f"the build record names a template outside its folder ({name!r})"
                        )
                    t.parent.mkdir(parents=True, exist_ok=True)
                    t.write_text(body, encoding="utf-8")
                continue
            name = by_role.get(role)
            if name not in attachments:
                name = by_base.get(PurePosixPath(written).name)
            if name is None:
                raise ValueError(
                    f"the {role} file {rel!r} that the study definition names is not attached"
                )
            target.write_bytes(attachments[name])
            sources[role] = attachments[name]
        study_path.write_text(text, encoding="utf-8")
        yield study_path, sources
