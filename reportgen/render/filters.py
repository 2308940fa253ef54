"""Number formatting for the report: the only place where figures are rounded.

Every function takes the raw value (a float, an int, ``None`` or a results record ``M``) and
returns text.  ``None`` (a measure that is undefined or not applicable) prints as an em dash,
never as 0.  The minus sign is the typographic one (U+2212), percentages carry a thin space
before ``%``, and thousands are grouped with a thin space, so that figures read the same in
the HTML and the PDF.  Registered as Jinja2 filters in :mod:`reportgen.render.environment`.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping
from decimal import ROUND_HALF_UP, Decimal
from typing import Any

DASH = "—"
MINUS = "−"
THIN = " "  # narrow no-break space


def _value(x: Any, key: str = "estimate") -> float | None:
    if isinstance(x, Mapping):
        x = x.get(key)
    if x is None or isinstance(x, bool):
        return None
    try:
        f = float(x)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


def fmt_num(x: Any, digits: int = 3) -> str:
    """A number with ``digits`` decimals (``None`` → em dash; typographic minus)."""
    v = _value(x)
    if v is None:
        return DASH
    # half away from zero on the shortest decimal form of the float (0.8125 → 81.3 %, not 81.2 %)
    q = Decimal(repr(v)).quantize(Decimal(1).scaleb(-digits), rounding=ROUND_HALF_UP)
    text = f"{q:.{digits}f}"
    if text.startswith("-"):
        text = MINUS + text[1:]
        if set(text[1:]) <= {"0", "."}:  # -0.000 reads as 0.000
            text = text[1:]
    return text


def fmt_estimate(m: Any, digits: int = 3) -> str:
    """The estimate of a results record ``M`` (or a bare number)."""
    return fmt_num(m, digits)


def fmt_ci(m: Any, digits: int = 3, *, pct: bool = False) -> str:
    """The interval of a record ``M`` as "low to high", or an em dash when it has none."""
    if not isinstance(m, Mapping):
        return DASH
    lo, hi = _value(m, "ci_low"), _value(m, "ci_high")
    if lo is None or hi is None:
        return DASH
    if pct:
        return f"{fmt_pct(lo, digits)} to {fmt_pct(hi, digits)}"
    return f"{fmt_num(lo, digits)} to {fmt_num(hi, digits)}"


def fmt_p(p: Any) -> str:
    """A p-value: three decimals, "< 0.001" below that, em dash when absent."""
    v = _value(p, "p_value")
    if v is None:
        return DASH
    if v < 0.001:
        return "<" + THIN + "0.001"
    return f"{v:.3f}"


def fmt_pct(x: Any, digits: int = 1) -> str:
    """A proportion (0.8125) as a percentage ("81.3 %")."""
    v = _value(x)
    if v is None:
        return DASH
    return fmt_num(Decimal(repr(v)) * 100, digits) + THIN + "%"


def fmt_int(n: Any) -> str:
    """A count with thin-space thousands grouping (12 345)."""
    if n is None or isinstance(n, bool):
        return DASH
    try:
        i = int(n)
    except (TypeError, ValueError):
        return DASH
    text = f"{abs(i):,}".replace(",", THIN)
    return (MINUS if i < 0 else "") + text


def fmt_level(conf: Any) -> str:
    """A confidence level (0.95) as "95 %"; 0.975 as "97.5 %"."""
    v = _value(conf)
    if v is None:
        return DASH
    text = f"{100.0 * v:.1f}".rstrip("0").rstrip(".")
    return text + THIN + "%"


def fmt_date(d: Any) -> str:
    """An ISO date (2026-11-20) from a date, a datetime or an ISO string; em dash when absent."""
    if d is None or d == "":
        return DASH
    if isinstance(d, dt.datetime):
        return d.date().isoformat()
    if isinstance(d, dt.date):
        return d.isoformat()
    text = str(d)
    return text[:10] if len(text) >= 10 and text[4] == "-" else text


def fmt_bytes(n: Any) -> str:
    """A file size in bytes, grouped (12 345 bytes)."""
    return fmt_int(n) + " bytes" if n is not None else DASH


def fmt_signed(x: Any, digits: int = 2) -> str:
    """A signed number with an explicit plus sign (+0.12, −0.30)."""
    v = _value(x)
    if v is None:
        return DASH
    text = fmt_num(v, digits)
    return text if text.startswith(MINUS) or set(text) <= {"0", "."} else "+" + text


def fmt_hash(h: Any, length: int = 16) -> str:
    """The first ``length`` hex digits of a SHA-256, then an ellipsis (full value in the appendix)."""
    if not h:
        return DASH
    text = str(h)
    return text if len(text) <= length else text[:length] + "…"


FILTERS = {
    "fmt_num": fmt_num,
    "fmt_estimate": fmt_estimate,
    "fmt_ci": fmt_ci,
    "fmt_p": fmt_p,
    "fmt_pct": fmt_pct,
    "fmt_int": fmt_int,
    "fmt_level": fmt_level,
    "fmt_date": fmt_date,
    "fmt_bytes": fmt_bytes,
    "fmt_signed": fmt_signed,
    "fmt_hash": fmt_hash,
}
