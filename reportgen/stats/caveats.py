"""Planning figures: how wide an interval is, and how many items a narrower one would need."""

from __future__ import annotations

import math


def half_width(ci_low: float | None, ci_high: float | None) -> float | None:
    """Half the width of an interval, or ``None`` when either bound is missing."""
    if ci_low is None or ci_high is None:
        return None
    if not (math.isfinite(ci_low) and math.isfinite(ci_high)):
        return None
    return (ci_high - ci_low) / 2.0


def items_needed(
    achieved_half_width: float | None, n_items: int, target_half_width: float
) -> int | None:
    """Items a study would need for an interval half-width of ``target_half_width``.

    An approximation: the half-width of an interval from ``n`` items shrinks like ``1/√n`` when
    the design and the agreement stay as they are, so ``n_needed = ceil(n · (h / target)²)``.
    Returns ``None`` when the achieved half-width is unknown or zero (nothing to scale).
    """
    if target_half_width <= 0:
        raise ValueError(f"target_half_width must be positive, got {target_half_width!r}")
    if achieved_half_width is None or n_items <= 0 or not math.isfinite(achieved_half_width):
        return None
    if achieved_half_width <= 0:
        return None
    ratio = achieved_half_width / target_half_width
    needed = n_items * ratio * ratio
    # Guard the ceiling against rounding in the product (e.g. 50 · 1.0000000000000002).
    return max(1, math.ceil(needed - 1e-9 * needed))
