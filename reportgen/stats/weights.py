"""Agreement weights built from the declared category list (Cohen 1968; Fleiss & Cohen 1973).

``w[i, j]`` is the credit given when one rating is category ``i`` and the other ``j``:
1 on the diagonal, 0 for the most distant pair.  Built from the study's declared categories,
never from the categories that happen to be observed.
"""

from __future__ import annotations

from typing import Literal

import numpy as np

WeightKind = Literal["identity", "linear", "quadratic"]


def agreement_weights(
    n_categories: int,
    kind: WeightKind = "identity",
    *,
    values: np.ndarray | None = None,
) -> np.ndarray:
    """(k, k) agreement weights.

    ``values`` are the numeric scores of the categories (default 0 .. k-1); linear weights are
    ``1 - |v_i - v_j| / (max v - min v)`` and quadratic ``1 - (v_i - v_j)^2 / (max v - min v)^2``.
    """
    k = int(n_categories)
    if k < 1:
        raise ValueError("n_categories must be at least 1")
    if kind == "identity" or k == 1:
        return np.eye(k)
    v = np.arange(k, dtype=float) if values is None else np.asarray(values, dtype=float)
    if v.shape != (k,):
        raise ValueError(f"values must have shape ({k},), got {v.shape}")
    span = float(v.max() - v.min())
    if span == 0.0:
        raise ValueError("category values must not all be equal")
    d = np.abs(v[:, None] - v[None, :]) / span
    if kind == "linear":
        return 1.0 - d
    if kind == "quadratic":
        return 1.0 - d**2
    raise ValueError(f"unknown weight kind {kind!r}; use identity, linear or quadratic")
