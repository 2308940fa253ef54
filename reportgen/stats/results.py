"""Result records of the statistics engine.

Every measure returns an :class:`Estimate`.  ``as_record()`` gives the JSON record ``M`` of the
results schema.  Nothing is rounded here: rounding happens only in the report's filters.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any


class DegenerateDataWarning(UserWarning):
    """A coefficient is undefined or uninformative for these data (said in words)."""


@dataclass(frozen=True)
class Estimate:
    """A statistic with its standard error, interval, test and the counts it came from.

    ``estimate`` is ``None`` (never NaN) when the statistic is undefined; ``warnings`` then says
    why in words.  ``se`` is the standard error used for the interval (non-null where one is
    published); ``p_value`` comes from the null distribution (e.g. the null SE of a kappa).
    """

    estimate: float | None
    se: float | None = None
    ci_low: float | None = None
    ci_high: float | None = None
    ci_method: str | None = None
    confidence_level: float | None = None
    z: float | None = None
    p_value: float | None = None
    items: int | None = None
    agreeing: int | None = None
    warnings: tuple[str, ...] = ()
    extra: dict[str, Any] = field(default_factory=dict)  # measure-specific figures (p_o, p_e, …)

    def as_record(self) -> dict[str, Any]:
        def clean(x: Any) -> Any:
            if x is None:
                return None
            if isinstance(x, float) and not math.isfinite(x):
                return None
            if hasattr(x, "item"):  # numpy scalar
                x = x.item()
            return x

        return {
            "estimate": clean(self.estimate),
            "se": clean(self.se),
            "ci_low": clean(self.ci_low),
            "ci_high": clean(self.ci_high),
            "ci_method": self.ci_method,
            "p_value": clean(self.p_value),
            "items": clean(self.items),
            "agreeing": clean(self.agreeing),
        }

    def replace(self, **changes: Any) -> Estimate:
        from dataclasses import replace

        return replace(self, **changes)
