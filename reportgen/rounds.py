"""Rounds and revisions of a study.

A study is qualified in **rounds**: the first qualification, then each requalification, every one
with its own date, plan, key, ratings and report.  A round's report has **revisions**:
corrections of that report.  Round 1 is the study folder as ``init`` writes it (an existing study
folder keeps working as round 1); round N ≥ 2 lives in ``<study folder>/round<N>/`` with a study
definition of its own whose id is ``<study id>.round<N>`` and which says ``round: N``.  So each
round is built into ``output/<study id>.round<N>/rev<M>/`` and archived as ``<study
id>.round<N>/rev<M>``: nothing a round writes touches an earlier round's files, and the archive
index tells rounds (the id) and revisions (the revision number) apart.

Only the standard library is imported at module level.
"""

from __future__ import annotations

import json
import re
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

ROUND_SUFFIX = re.compile(r"^(?P<base>.+)\.round(?P<n>[2-9]|[1-9][0-9]+)$")
ROUND_FOLDER = re.compile(r"^round(?P<n>[2-9]|[1-9][0-9]+)$")


def split_round(study_id: str) -> tuple[str, int]:
    """``("weld", 2)`` for ``weld.round2``; ``(study_id, 1)`` for an id without a round."""
    m = ROUND_SUFFIX.match(study_id)
    return (m.group("base"), int(m.group("n"))) if m else (study_id, 1)


def round_id(base: str, n: int) -> str:
    """The study id of round ``n`` (round 1 keeps the base id)."""
    return base if n == 1 else f"{base}.round{n}"


def history_json(entries: Sequence[Any], series: Sequence[Any]) -> str:
    """``history --json``: every archived revision with its round, and the series in order."""

    def row(e: Any, superseded_by: int | None = None) -> dict[str, Any]:
        base, n = split_round(e.study_id)
        return {
            "study_id": e.study_id,
            "study": base,
            "round": n,
            "revision": e.revision,
            "date": e.study_date,
            "verdict": e.verdict,
            "characteristic": e.characteristic,
            "station": e.station,
            "folder": e.folder,
            "superseded_by": superseded_by,
        }

    out = {
        "revisions": [row(e) for e in entries],
        "series": [
            {
                "characteristic": s.characteristic,
                "station": s.station,
                "points": [row(p.entry, p.superseded_by) for p in s.points],
            }
            for s in series
        ],
    }
    return json.dumps(out, indent=2, sort_keys=True)


# --------------------------------------------------------------------------- rounds on disk

ROUND_INPUTS = {
    "ratings": "plan/ratings-entry.csv",
    "reference": "items.csv",
    "key": "plan/key/key.csv",
}
PARTIAL_PREFIX = ".partial-round"


@dataclass(frozen=True)
class Rounds:
    """The rounds of one study: round number -> its study definition file."""

    base_id: str
    folder: Path  # the study folder (round 1)
    files: dict[int, Path]

    @property
    def latest(self) -> int:
        return max(self.files)

    def folder_of(self, n: int) -> Path:
        return self.folder if n == 1 else self.folder / f"round{n}"


def find_rounds(study_file: Path, study_id: str) -> Rounds:
    """The rounds of the study whose definition is ``study_file`` (any of its rounds)."""
    base_id, n = split_round(study_id)
    here = Path(study_file).resolve().parent
    folder = here.parent if n > 1 and ROUND_FOLDER.match(here.name) else here
    files = {1: folder / "study.yaml" if n > 1 else Path(study_file).resolve()}
    if n > 1 and not files[1].is_file():
        files[1] = Path(study_file).resolve()  # a round folder without its round 1 beside it
    for sub in sorted(folder.iterdir()):
        m = ROUND_FOLDER.match(sub.name)
        if m and (sub / "study.yaml").is_file():
            files[int(m.group("n"))] = sub / "study.yaml"
    return Rounds(base_id, folder, files)


def has_ratings(study_file: Path) -> bool:
    """True when the round's ratings file holds at least one rating (a filled-in cell)."""
    import csv

    from .yamlio import read_yaml

    data = read_yaml(study_file).data
    ratings = data.get("ratings") if isinstance(data, dict) else None
    if isinstance(ratings, dict):
        ratings = ratings.get("file")
    if not isinstance(ratings, str):
        return False
    path = Path(study_file).parent / ratings
    if not path.is_file():
        return False
    if path.suffix.lower() not in (".csv", ".tsv", ".txt"):
        return path.stat().st_size > 0
    with open(path, encoding="utf-8-sig", errors="replace", newline="") as fh:
        sample = fh.read(4096)
        fh.seek(0)
        delim = ";" if sample.count(";") > sample.count(",") else ","
        rows = csv.reader(fh, delimiter="\t" if "\t" in sample else delim)
        header = [h.strip().lower() for h in next(rows, [])]
        col = header.index("rating") if "rating" in header else None
        for row in rows:
            cells = row[col:] if col is not None else row[1:]
            if col is not None and len(row) > col and row[col].strip():
                return True
            if col is None and any(c.strip() for c in cells):
                return True
    return False


def choose_round(rounds: Rounds, wanted: str) -> int:
    """The round ``--round`` names: ``next`` or a number; refuses unknown and older rounds.

    Raises InputError (exit 2) for an unknown round or one older than the latest, ExistsError
    (exit 5) for a round whose ratings are already being entered.
    """
    from .errors import ExistsError, InputError

    latest = rounds.latest
    if wanted == "next":
        n = latest + 1
    elif wanted.isdigit() and int(wanted) >= 1:
        n = int(wanted)
    else:
        raise InputError.single(
            "--round", f"{wanted!r} is not a round; give next or a round number", key="--round"
        )
    if n > latest + 1:
        raise InputError.single(
            "--round",
            f"there is no round {n}: the latest round of {rounds.base_id} is {latest}",
            key="--round",
            hint="give --round next to start round " + str(latest + 1),
        )
    if n < latest:
        raise InputError.single(
            "--round",
            f"round {n} is older than the latest round ({latest}) of {rounds.base_id}; "
            "an earlier round is never planned again",
            key="--round",
            hint="to correct an earlier round's report, raise its study.revision and build again",
        )
    if n in rounds.files and has_ratings(rounds.files[n]):
        raise ExistsError(
            f"round {n} of {rounds.base_id} already has ratings "
            f"({rounds.files[n]}); its plan is kept. Give --round next for a new round"
        )
    return n


def _top_level_blocks(lines: list[str]) -> list[tuple[str | None, int, int]]:
    """(key, first line, end line) of every top-level block of a block-style YAML text."""
    blocks: list[tuple[str | None, int, int]] = []
    key_re = re.compile(r"^([A-Za-z_][A-Za-z0-9_]*)\s*:")
    for i, line in enumerate(lines):
        m = key_re.match(line)
        if m:
            if blocks:
                k, s, _ = blocks[-1]
                blocks[-1] = (k, s, i)
            blocks.append((m.group(1), i, len(lines)))
    return blocks


def round_definition(text: str, *, base_id: str, n: int, date: str, source: str) -> str:
    """The study definition of round ``n``: the last round's, with its own id, revision 1,
    date, inputs inside the round folder, and no plan seed or start (a new draw)."""
    from .errors import InputError

    lines = text.splitlines()
    blocks = _top_level_blocks(lines)
    keys = [k for k, _, _ in blocks]
    study = next(((s, e) for k, s, e in blocks if k == "study"), None)
    if study is None or lines[study[0]].split(":", 1)[1].split("#", 1)[0].strip():
        raise InputError.single(
            source,
            "the study block must be written one key per line (study:, then indented keys) "
            "for a new round to be derived from it",
            key="study",
        )
    out: list[str] = [
        f"# Round {n} of {base_id} (a requalification), written by `reportgen plan --round` from",
        f"# {source}.  Set study.date to the day this round is rated, if it differs.",
    ]
    for k, s, e in blocks:
        if k is None:
            continue
        if k == "study":
            out.append(lines[s])
            body = lines[s + 1 : e]
            seen_date = False
            for line in body:
                m = re.match(r"^(\s+)(id|revision|date)\s*:", line)
                if m and m.group(2) == "id":
                    out.append(f'{m.group(1)}id: "{round_id(base_id, n)}"')
                    continue
                if m and m.group(2) == "revision":
                    out.append(f"{m.group(1)}revision: 1")
                    continue
                if m and m.group(2) == "date":
                    out.append(f"{m.group(1)}date: {date}")
                    seen_date = True
                    continue
                out.append(line)
            if not seen_date:
                out.insert(len(out) - len(body), f"  date: {date}")
        elif k in ROUND_INPUTS:
            out.append(f"{k}: {ROUND_INPUTS[k]}")
        elif k == "plan":
            continue  # a new round draws new labels and orders and has its own start
        elif k == "report":  # company templates: one folder up from the round folder
            out.extend(
                re.sub(r"(templates\s*:\s*[\"']?)(?![/~])([^\"'\s,}]+)", r"\1../\2", line)
                for line in lines[s:e]
            )
        else:
            out.extend(lines[s:e])
    # the prologue (comments before the first key) is replaced by the round header
    for k, path in ROUND_INPUTS.items():
        if k not in keys:
            out.append(f"{k}: {path}")
    return "\n".join(out) + "\n"


def start_round(
    rounds: Rounds,
    n: int,
    *,
    items_file: Path,
    date: str,
    write: Any,
) -> Path:
    """Create ``round<n>/`` beside the earlier rounds, whole or not at all.

    Everything (study definition, item list, and what ``write(study, plan_folder)`` writes, the
    plan) goes into a hidden sibling first, which is renamed into place at the end: a run
    killed on the way leaves only that hidden folder, which every command ignores and the next
    ``--round`` run removes; the earlier rounds' files are never opened for writing.
    """
    import os
    import secrets
    import shutil

    from .errors import ExistsError
    from .study import load_study

    final = rounds.folder_of(n)
    if final.exists():
        raise ExistsError(f"{final} already exists; it is kept")
    for old in rounds.folder.glob(f"{PARTIAL_PREFIX}{n}-*"):
        shutil.rmtree(old, ignore_errors=True)  # left by a killed run
    source = rounds.files[rounds.latest]
    text = round_definition(
        source.read_text(encoding="utf-8"),
        base_id=rounds.base_id,
        n=n,
        date=date,
        source=str(source),
    )
    tmp = rounds.folder / f"{PARTIAL_PREFIX}{n}-{os.getpid()}-{secrets.token_hex(4)}"
    tmp.mkdir()
    try:
        (tmp / "study.yaml").write_text(text, encoding="utf-8", newline="\n")
        shutil.copyfile(items_file, tmp / "items.csv")
        study = load_study(tmp / "study.yaml", require_inputs=False)
        write(study, tmp / "plan")
        os.rename(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def point_label(study_id: str, revision: int) -> str:
    """How history names one archived report: ``weld rev1``, ``weld round 2 rev1``."""
    base, n = split_round(study_id)
    return f"{base} rev{revision}" if n == 1 else f"{base} round {n} rev{revision}"
