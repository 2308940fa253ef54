"""Disagreement zone around a limit (numpy only).

With several raters and measured reference values, the range of values around a limit in
which the raters do not all agree: from the last item every rating accepts to the first item
every rating rejects, going across the limit.  Its width as a share of the tolerance is read
like a %GRR figure (AIAG MSA 4th ed., 2010, ch. III C, the signal-detection approach; from
memory).
"""

from __future__ import annotations

from typing import Any

import numpy as np


def disagreement_zone(
    values: np.ndarray, accepted: np.ndarray, rated: np.ndarray, side: str
) -> dict[str, Any]:
    """``accepted``/``rated``: per item, accept ratings and all ratings (all raters, trials).

    ``side`` is where rejects lie: "lower" (values below the limit reject) or "upper".
    Returns the zone's ends (None where no all-accept or all-reject item bounds it), width and
    the indices of the items strictly inside, in value order.
    """
    v = np.asarray(values, dtype=float)
    a = np.asarray(accepted, dtype=int)
    m = np.asarray(rated, dtype=int)
    ok = m > 0
    idx = np.flatnonzero(ok)
    if side == "lower":  # mirror so that rejects lie above
        w = -v
    else:
        w = v
    all_acc = idx[a[idx] == m[idx]]
    all_rej = idx[a[idx] == 0]
    mixed = idx[(a[idx] > 0) & (a[idx] < m[idx])]
    # accept end: the furthest all-accept item not beyond any non-accept item
    not_acc = idx[a[idx] < m[idx]]
    cap = w[not_acc].min() if not_acc.size else np.inf
    acc_end = all_acc[w[all_acc] <= cap]
    acc_i = int(acc_end[np.argmax(w[acc_end])]) if acc_end.size else None
    not_rej = idx[a[idx] > 0]
    floor = w[not_rej].max() if not_rej.size else -np.inf
    rej_end = all_rej[w[all_rej] >= floor]
    rej_i = int(rej_end[np.argmin(w[rej_end])]) if rej_end.size else None
    lo_w = w[acc_i] if acc_i is not None else -np.inf
    hi_w = w[rej_i] if rej_i is not None else np.inf
    inside = [int(i) for i in idx if lo_w < w[i] < hi_w]
    inside.sort(key=lambda i: (v[i], i))
    ends = [None if i is None else float(v[i]) for i in (acc_i, rej_i)]
    width = abs(ends[1] - ends[0]) if None not in ends else None  # type: ignore[operator]
    return {
        "accept_end": ends[0],
        "reject_end": ends[1],
        "accept_end_item": acc_i,
        "reject_end_item": rej_i,
        "width": width,
        "inside": inside,
        "mixed_items": int(mixed.size),
    }
