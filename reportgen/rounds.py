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
