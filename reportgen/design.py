"""Study design summary and the warnings a practitioner needs before trusting a study.

Plain data out (JSON-ready dicts and lists), no printing: ``reportgen check`` prints it, the
report may show it.  numpy only.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .model import MISSING, Ratings, Study
from .yamlio import display_path

#: fewer items than this draws a warning.  Common practice, no source: a rule of thumb of the
#: trade for attribute studies, not a published threshold.
MIN_ITEMS = 30


def design_summary(study: Study, ratings: Ratings) -> dict[str, Any]:
    """Items, raters, trials, categories, completeness, reference coverage and counts."""
    codes = ratings.codes
    present = codes != MISSING
    n_items, n_raters, n_trials = codes.shape
    per_rater = present.sum(axis=(0, 2))
    per_trial = present.sum(axis=(0, 1))
    out: dict[str, Any] = {
        "study": {
            "id": study.id,
            "title": study.title,
            "revision": study.revision,
            "definition": display_path(study.path),
        },
        "scale": study.scale,
        "categories": [{"code": c.code, "label": c.label} for c in study.categories],
        "defect_category": study.defect_category,
        "items": int(n_items),
        "raters": [r.id for r in study.raters],
        "trials": int(n_trials),
        "missing": study.missing,
        "ratings": {"expected": int(codes.size), "present": int(present.sum())},
        "completeness": {
            "by_rater": {
                rid: {"present": int(per_rater[r]), "expected": int(n_items * n_trials)}
                for r, rid in enumerate(ratings.raters)
            },
            "by_trial": {
                str(t + 1): {"present": int(per_trial[t]), "expected": int(n_items * n_raters)}
                for t in range(n_trials)
            },
        },
        "rating_counts": _counts(codes[present], ratings.categories),
        "reference": None,
        "sources": [
            {
                "role": s.role,
                "path": display_path(s.path),
                "sha256": s.sha256,
                "rows": s.rows,
                "encoding": s.encoding,
                "delimiter": s.delimiter,
                "layout": s.layout,
            }
            for s in ratings.sources
        ],
        "notes": list(ratings.notes),
    }
    if ratings.reference is not None:
        ref = ratings.reference
        out["reference"] = {
            "items": int(n_items),
            "items_with_reference": int((ref != MISSING).sum()),
            "counts": _counts(ref[ref != MISSING], ratings.categories),
        }
    return out


def _counts(values: np.ndarray, categories: tuple[str, ...]) -> dict[str, int]:
    counts = (
        np.bincount(values.astype(np.int64), minlength=len(categories))
        if values.size
        else np.zeros(len(categories), np.int64)
    )
    return {c: int(counts[k]) for k, c in enumerate(categories)}


def design_warnings(study: Study, ratings: Ratings) -> list[dict[str, str]]:
    """Warnings as ``{"kind": ..., "message": ...}``; ``check --strict`` fails on any."""
    out: list[dict[str, str]] = []
    n_items = ratings.n_items
    if n_items < MIN_ITEMS:
        out.append(
            {
                "kind": "few-items",
                "message": f"only {n_items} item{'s' if n_items != 1 else ''}; at least {MIN_ITEMS} is common practice, and intervals will be wide",
            }
        )
    if ratings.reference is not None:
        ref = ratings.reference
        seen = set(np.unique(ref[ref != MISSING]).tolist())
        for k, cat in enumerate(study.categories):
            if k not in seen:
                out.append(
                    {
                        "kind": "category-not-in-reference",
                        "message": f"category {cat.code} ({cat.label}) is the reference of no item, so no rater is tested on it",
                    }
                )
    codes = ratings.codes
    for r, rid in enumerate(ratings.raters):
        given = codes[:, r, :]
        given = given[given != MISSING]
        if not given.size:
            out.append(
                {
                    "kind": "rater-without-ratings",
                    "message": f"rater {rid} gave no rating at all; every figure of this rater is left empty",
                }
            )
        if given.size and (given == given[0]).all():
            code = ratings.categories[int(given[0])]
            out.append(
                {
                    "kind": "single-category-rater",
                    "message": f"rater {rid} gave every rating as {code}; kappa-type measures are not informative for this rater",
                }
            )
    for t in range(ratings.n_trials):
        if ratings.n_trials > 1 and not (codes[:, :, t] != MISSING).any():
            out.append(
                {
                    "kind": "trial-without-ratings",
                    "message": f"trial {t + 1} holds no rating at all; check that the ratings of every trial were entered",
                }
            )
    if ratings.n_raters < 2:
        out.append(
            {
                "kind": "single-rater",
                "message": "only 1 rater: reproducibility (agreement among the raters) cannot be measured",
            }
        )
    if ratings.n_trials < 2:
        out.append(
            {
                "kind": "single-trial",
                "message": "only 1 trial: repeatability (each rater against their own other trials) cannot be measured",
            }
        )
    out += shared_name_warnings(study)
    return out


def shared_name_warnings(study: Study) -> list[dict[str, str]]:
    """Two rater ids with one name (Unicode NFC, case and spacing aside): the register keeps
    them as two people, and a reader of the report may not."""
    import unicodedata

    by_name: dict[str, list[str]] = {}
    for r in study.raters:
        key = " ".join(unicodedata.normalize("NFC", r.name).split()).casefold()
        by_name.setdefault(key, []).append(r.id)
    return [
        {
            "kind": "shared-name",
            "message": f"raters {', '.join(ids)} share the name "
            f"{next(r.name for r in study.raters if r.id == ids[0])!r}; the register keeps them "
            "as different people (by rater id) — give each a distinguishing name if they are",
        }
        for ids in by_name.values()
        if len(ids) > 1
    ]
