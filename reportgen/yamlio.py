"""Strict YAML reading with positions.

PyYAML's ``safe_load`` accepts aliases (a small file can expand enormously downstream) and
silently keeps the last of two duplicate keys.  This module composes the node graph with a
loader that refuses aliases, caps the input size, and then walks the nodes itself into plain
Python values, refusing duplicate keys and recording where every value sits in the file.

The walk keeps, for each key path such as ``("raters", 2, "id")``:

* ``locations``: where the value starts (1-based line and column),
* ``key_locations``: where the mapping key itself starts (for "unknown key" messages),
* ``texts``: for scalars, the text exactly as written (``1`` -> ``"1"``, ``No`` -> ``"No"``,
  ``1.0`` -> ``"1.0"``), so that codes and ids can be taken as text whatever YAML 1.1 makes of
  them.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from .errors import InputError, Location, Problem

#: the largest study definition read (bytes); a definition is a few kilobytes
MAX_YAML_BYTES = 1_000_000
#: deepest nesting walked; a study definition needs about 5 levels
MAX_DEPTH = 50

KeyPath = tuple[Any, ...]


def display_path(path: str | os.PathLike[str]) -> str:
    """A path as shown in messages: relative to the working folder when inside it."""
    p = Path(path)
    try:
        absolute = p.resolve()
        rel = absolute.relative_to(Path.cwd().resolve())
    except (ValueError, OSError):
        return str(p)
    return str(rel)


def format_key(keys: KeyPath) -> str:
    """``("raters", 2, "id")`` -> ``raters[2].id``."""
    out = ""
    for k in keys:
        if isinstance(k, int):
            out += f"[{k}]"
        else:
            out += f".{k}" if out else str(k)
    return out


class StrictLoader(yaml.SafeLoader):
    """A safe loader that refuses aliases (and with them ``<<:`` merge keys)."""

    def compose_node(self, parent: Any, index: Any) -> Any:
        if self.check_event(yaml.AliasEvent):
            ev = self.peek_event()
            raise yaml.composer.ComposerError(
                None,
                None,
                f"YAML aliases (*{ev.anchor}) are not allowed; write the value out",
                ev.start_mark,
            )
        return super().compose_node(parent, index)


@dataclass
class YamlDocument:
    """A YAML file read into plain Python values with the position of each value."""

    path: Path
    shown: str  # the path as shown in messages
    data: Any
    locations: dict[KeyPath, Location] = field(default_factory=dict)
    key_locations: dict[KeyPath, Location] = field(default_factory=dict)
    texts: dict[KeyPath, str] = field(default_factory=dict)
    tags: dict[KeyPath, str] = field(default_factory=dict)

    def where(self, keys: KeyPath, *, key_node: bool = False) -> Location:
        """Position of a key path (the key itself with ``key_node``), else the nearest parent."""
        table = self.key_locations if key_node else self.locations
        k = tuple(keys)
        if k in table:
            return table[k]
        while k:
            k = k[:-1]
            if k in self.locations:
                loc = self.locations[k]
                return Location(loc.path, loc.line, loc.column, format_key(keys) or None)
        return Location(self.shown, None, None, format_key(keys) or None)


def _mark_location(shown: str, mark: Any, keys: KeyPath) -> Location:
    return Location(shown, mark.line + 1, mark.column + 1, format_key(keys) or None)


def _decode(raw: bytes, shown: str) -> str:
    if raw.startswith(b"\xff\xfe") or raw.startswith(b"\xfe\xff"):
        try:
            return raw.decode("utf-16")
        except UnicodeDecodeError as exc:
            raise InputError.single(shown, f"not valid UTF-16 text ({exc.reason})") from None
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw.count(b"\n", 0, exc.start) + 1
        raise InputError.single(
            shown,
            f"not UTF-8 text (byte 0x{raw[exc.start]:02x})",
            line=line,
            hint="save the study definition as UTF-8",
        ) from None


def read_yaml(path: str | os.PathLike[str], *, what: str = "study definition") -> YamlDocument:
    """Read a YAML file strictly; raise :class:`InputError` with every problem found."""
    p = Path(path)
    shown = display_path(p)
    try:
        size = p.stat().st_size
    except FileNotFoundError:
        raise InputError.single(shown, f"{what} not found") from None
    except OSError as exc:
        raise InputError.single(shown, f"cannot read the {what}: {exc.strerror}") from None
    if p.is_dir():
        raise InputError.single(shown, f"is a folder, not a {what} file")
    if size > MAX_YAML_BYTES:
        raise InputError.single(
            shown,
            f"{what} is {size:,} bytes; the limit is {MAX_YAML_BYTES:,}",
            hint="keep ratings in the CSV file, not in the YAML",
        )
    from .safeio import read_limited

    raw = read_limited(p, MAX_YAML_BYTES, shown=shown, what=what)
    if raw[:4] in (b"PK\x03\x04", b"%PDF") or raw[:8] == b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1":
        kind = "a PDF" if raw[:4] == b"%PDF" else "a workbook or other binary file"
        raise InputError.single(
            shown,
            f"this is {kind}, not a {what}",
            hint=f"give the {what} (a YAML file such as study.yaml)",
        )
    text = _decode(raw, shown)
    return parse_yaml(text, shown=shown, path=p, what=what)


def parse_yaml(
    text: str, *, shown: str, path: Path | None = None, what: str = "study definition"
) -> YamlDocument:
    """Parse YAML text strictly (see :func:`read_yaml`)."""
    try:
        loader = StrictLoader(text)
        try:
            node = loader.get_single_node()
        finally:
            loader.dispose()
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        message = exc.problem or exc.context or "YAML syntax error"
        if exc.context and exc.problem:
            message = f"{message} ({exc.context})"
        line = mark.line + 1 if mark is not None else None
        column = mark.column + 1 if mark is not None else None
        raise InputError([Problem(Location(shown, line, column), message)]) from None
    except yaml.YAMLError as exc:
        raise InputError.single(shown, f"YAML error: {exc}") from None
    except RecursionError:
        raise InputError.single(shown, "YAML nesting is too deep") from None
    if node is None:
        raise InputError.single(shown, f"the {what} is empty")
    doc = YamlDocument(path=path or Path(shown), shown=shown, data=None)
    problems: list[Problem] = []
    constructor = StrictLoader("")
    doc.data = _walk(node, (), doc, constructor, problems, 0)
    if problems:
        raise InputError(problems)
    return doc


def _walk(
    node: yaml.Node,
    keys: KeyPath,
    doc: YamlDocument,
    constructor: StrictLoader,
    problems: list[Problem],
    depth: int,
) -> Any:
    doc.locations[keys] = _mark_location(doc.shown, node.start_mark, keys)
    if depth > MAX_DEPTH:
        problems.append(Problem(doc.locations[keys], f"nesting deeper than {MAX_DEPTH} levels"))
        return None
    if isinstance(node, yaml.ScalarNode):
        doc.texts[keys] = node.value
        doc.tags[keys] = node.tag
        try:
            return constructor.construct_object(node, deep=True)
        except (yaml.YAMLError, ValueError, OverflowError) as exc:
            problems.append(
                Problem(doc.locations[keys], f"cannot read value {node.value!r}: {exc}")
            )
            return node.value
    if isinstance(node, yaml.SequenceNode):
        return [
            _walk(child, (*keys, i), doc, constructor, problems, depth + 1)
            for i, child in enumerate(node.value)
        ]
    if isinstance(node, yaml.MappingNode):
        out: dict[Any, Any] = {}
        first: dict[Any, int] = {}
        for key_node, value_node in node.value:
            if not isinstance(key_node, yaml.ScalarNode):
                problems.append(
                    Problem(
                        _mark_location(doc.shown, key_node.start_mark, keys),
                        "a key must be a plain word, not a list or mapping",
                    )
                )
                continue
            # keys are names: take them as written, so `yes:` or `1:` do not turn into True or 1
            key: Any = key_node.value
            child = (*keys, key)
            if key in first:
                problems.append(
                    Problem(
                        _mark_location(doc.shown, key_node.start_mark, child),
                        f"duplicate key {key!r} (first on line {first[key]})",
                        "give each key once",
                    )
                )
                continue
            first[key] = key_node.start_mark.line + 1
            doc.key_locations[child] = _mark_location(doc.shown, key_node.start_mark, child)
            out[key] = _walk(value_node, child, doc, constructor, problems, depth + 1)
        return out
    problems.append(Problem(doc.locations[keys], f"unexpected YAML node {type(node).__name__}"))
    return None
