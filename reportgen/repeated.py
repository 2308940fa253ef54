"""Rates counted over repeated trials get intervals that treat the item as the unit.

Hooked into :func:`reportgen.analysis.analyse`: with two or more trials, the per-rater and
panel effectiveness, miss rate and false alarm rate keep their estimates but get the design-effect
adjusted Wilson interval (:mod:`reportgen.stats.clustered`; Rao & Scott 1992, Donner & Klar
2000) in place of the interval that counts every rating as independent.  Each record gains
the design effect in ``results["design"]["rate_intervals"]["design_effects"]``;
``results["design"]["rate_intervals"]`` says which interval was used.
"""

from __future__ import annotations

from typing import Any

import numpy as np

CI_METHOD = "design-effect adjusted Wilson, item as the unit (Rao & Scott 1992; Donner & Klar 2000)"
TEXT = (
    "With {t} trials the ratings of one item are not independent, so the effectiveness, miss "
    "rate and false alarm rate (per rater and for the panel) use a design-effect adjusted "
    "Wilson interval with the item as the unit (Rao & Scott 1992; Donner & Klar 2000): the "
    "cluster-robust variance over items gives the design effect D, and the interval is formed "
    "on M / D effective ratings. The interval that counts every rating as independent would be "
    "too narrow."
)


def _set(
    rec: Any,
    events: np.ndarray,
    ratings: np.ndarray,
    level: float,
    deffs: dict[str, float],
    path: str,
) -> None:
    from .stats.clustered import clustered_wilson

    if not isinstance(rec, dict) or rec.get("estimate") is None or ratings.sum() <= 0:
        return
    keep = ratings > 0
    r = clustered_wilson(events[keep], ratings[keep], level)
    rec["se"] = float(r["se"])
    rec["ci_low"] = float(r["ci_low"])
    rec["ci_high"] = float(r["ci_high"])
    rec["ci_method"] = CI_METHOD
    deffs[path] = float(r["design_effect"])


def apply(
    codes: np.ndarray,
    ref: np.ndarray,
    defect: int | None,
    raters: tuple[str, ...],
    level: float,
    results: dict[str, Any],
) -> None:
    """Replace the rate intervals in ``results`` (accuracy and panel_accuracy) in place."""
    n, r, t = codes.shape
    if t < 2:
        return
    sub = codes.astype(np.int64)
    has_ref = ref >= 0
    rated = (sub >= 0) & has_ref[:, None, None]  # (n, r, t)
    match = rated & (sub == ref[:, None, None])
    blocks: list[tuple[Any, slice | int, str]] = [
        ((results.get("accuracy") or {}).get(rid), j, f"accuracy.{rid}")
        for j, rid in enumerate(raters)
    ]
    blocks.append((results.get("panel_accuracy"), slice(None), "panel_accuracy"))
    deffs: dict[str, float] = {}
    for block, j, base in blocks:
        if not isinstance(block, dict):
            continue
        ra = rated[:, j, :].reshape(n, -1)
        ma = match[:, j, :].reshape(n, -1)
        sa = sub[:, j, :].reshape(n, -1)
        _set(
            block.get("effectiveness"), ma.sum(1), ra.sum(1), level, deffs, f"{base}.effectiveness"
        )
        if defect is not None:
            is_def = ref == defect
            is_ok = has_ref & ~is_def
            miss = ra & (sa != defect)
            fa = ra & (sa == defect)
            _set(
                block.get("miss_rate"),
                miss[is_def].sum(1),
                ra[is_def].sum(1),
                level,
                deffs,
                f"{base}.miss_rate",
            )
            _set(
                block.get("false_alarm_rate"),
                fa[is_ok].sum(1),
                ra[is_ok].sum(1),
                level,
                deffs,
                f"{base}.false_alarm_rate",
            )
    design = results.get("design")
    if isinstance(design, dict):
        design["rate_intervals"] = {
            "ci_method": CI_METHOD,
            "text": TEXT.format(t=t),
            "design_effects": dict(sorted(deffs.items())),
        }
