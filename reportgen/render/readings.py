"""One-line plain-words readings of a figure, shown beside every number in the report.

Each reading takes a results record ``M`` (estimate, interval, counts) and says what it means
for someone who is not a statistician.  The words for a coefficient's size come from the
published scale the study names (``size_words``, Landis & Koch 1977 by default; Krippendorff 2004
for alpha; see :mod:`reportgen.sizewords`), or are left out where no such scale applies (Kendall's
W, tau-b): they describe, the criteria decide.
"""

from __future__ import annotations

from collections.abc import Mapping
from contextvars import ContextVar
from typing import Any

from ..sizewords import DEFAULT_SCALE, band, scale_for
from .filters import _value, fmt_int, fmt_pct

#: the study's scale for kappa-type size words, set by the report context builder
SIZE_SCALE: ContextVar[str] = ContextVar("size_scale", default=DEFAULT_SCALE)

SCALE_SHORT = {
    "landis-koch-1977": "Landis & Koch 1977",
    "fleiss-1981": "Fleiss 1981",
    "krippendorff-2004": "Krippendorff 2004",
}


def _spread(m: Mapping[str, Any], key: str) -> str:
    """What the interval says, in words (the numbers are in the interval column)."""
    lo, hi = _value(m, "ci_low"), _value(m, "ci_high")
    scale = scale_for(key, SIZE_SCALE.get())
    if lo is None or hi is None:
        return "; no interval"
    if scale is None:
        return ""
    a, b = band(lo, scale), band(hi, scale)
    return "; the interval stays in that band" if a == b else f"; the interval spans {a} to {b}"


def _undefined(m: Any) -> str | None:
    if not isinstance(m, Mapping):
        return "not computed for this study"
    if _value(m) is None:
        return "undefined for these data (see the warnings)"
    return None


def read_proportion(m: Any, what: str = "items agree") -> str:
    """ "41 of 50 items agree (82.0 %)"; the interval is in its own column."""
    u = _undefined(m)
    if u:
        return u
    n, a = m.get("items"), m.get("agreeing")
    count = f"{fmt_int(a)} of {fmt_int(n)} {what}" if n is not None and a is not None else what
    return f"{count} ({fmt_pct(m)})"


def size_text(v: float, key: str) -> str:
    """ "substantial (Landis & Koch 1977)", or the absence of a published scale said plainly."""
    scale = scale_for(key, SIZE_SCALE.get())
    if scale is None:
        return "no size word (no published scale is applied to this coefficient)"
    lead = "below chance agreement; " if v < 0 and scale.family == "kappa" else ""
    return f"{lead}{band(v, scale)} ({SCALE_SHORT[scale.name]})"


def read_coefficient(m: Any, key: str = "cohen_kappa") -> str:
    """Reading of a chance-corrected coefficient (kappa, alpha, AC1 …) on the study's scale."""
    u = _undefined(m)
    if u:
        return u
    return size_text(float(_value(m) or 0.0), key) + _spread(m, key)


def read_rate(m: Any, kind: str = "miss") -> str:
    """Reading of a miss rate or false alarm rate (lower is better)."""
    u = _undefined(m)
    if u:
        return u
    hi = _value(m, "ci_high")
    what = {
        "miss": "of the ratings of defect items called them conforming",
        "false_alarm": "of the ratings of conforming items called them defect",
    }.get(kind, "of the ratings")
    text = f"{fmt_pct(m)} {what}"
    if hi is not None:
        text += f"; the true rate may be as high as {fmt_pct(hi)}"
    return text


def read_effectiveness(m: Any) -> str:
    u = _undefined(m)
    if u:
        return u
    return f"{fmt_pct(m)} of the ratings match the reference"


def read_ordinal_share(m: Any, what: str) -> str:
    """Reading of an ordered-scale share against the reference (exact, within one step)."""
    u = _undefined(m)
    if u:
        return u
    return f"{fmt_pct(m)} of the ratings {what}"


def read_rank(m: Any) -> str:
    """Reading of Kendall's W or tau-b: agreement on the order of items."""
    u = _undefined(m)
    if u:
        return u
    v = float(_value(m) or 0.0)
    side = "the same" if v > 0 else "the opposite" if v < 0 else "no common"
    return f"{side} order of the items, by sign; no size word (no published scale is applied)"


def read_measure(m: Any, key: str) -> str:
    """Dispatch on the measure key (last part of its results path)."""
    if key in ("agreement",):
        return read_proportion(m)
    if key == "effectiveness":
        return read_effectiveness(m)
    if key == "exact_agreement":
        return read_ordinal_share(m, "equal the reference")
    if key == "within_one_agreement":
        return read_ordinal_share(m, "are at most one step from the reference")
    if key == "miss_rate":
        return read_rate(m, "miss")
    if key == "false_alarm_rate":
        return read_rate(m, "false_alarm")
    if key in ("kendall_w", "kendall_tau_b"):
        return read_rank(m)
    return read_coefficient(m, key)


READINGS = {
    "read_proportion": read_proportion,
    "read_coefficient": read_coefficient,
    "read_rate": read_rate,
    "read_effectiveness": read_effectiveness,
    "read_rank": read_rank,
    "read_ordinal_share": read_ordinal_share,
    "read_measure": read_measure,
}
