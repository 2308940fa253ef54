"""Text for people: no results keys, no code identifiers, one format per kind of number.

The verdict's next steps and reasons are written by verdict.py for every output (terminal,
results.json, report); some name a measure by its results path (``accuracy.INS-A.miss_rate``)
or give a rate as a fraction. The report passes such text through :func:`plain_text`, which
names the measure in words and gives rates as percentages with one decimal, the report's format
for rates (render/filters.py). Formulas of the method statement set their indices as
subscripts (:func:`formula_html`) rather than as ``n_c``.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping

from markupsafe import Markup, escape

#: a results path: group, optional rater (or *), measure
_PATH = re.compile(
    r"\b(repeatability|accuracy|reproducibility|panel_accuracy|ordinal)"
    r"(?:\.([A-Za-z0-9*][\w*-]*))?\.([a-z][a-z0-9_]*)\b"
)
#: a rate named in words followed by a fraction ("miss rate 0.0175")
_RATE = re.compile(
    r"\b(miss rate|false alarm rate|effectiveness|agreement rate)( (?:of |at )?)"
    r"(0\.\d+|1\.0+|[01](?=[,;)]))(?!\d)(?!\.\d)"
)
#: a judged rate against its level ("miss rate of INS-C, estimate 0.316 against 0.02")
_JUDGED = re.compile(
    r"\b((?:miss rate|false alarm rate|effectiveness|agreement)\b[^,;:]*, "
    r"(?:estimate|lower bound|upper bound) )(0\.\d+|[01])( against )(0\.\d+|[01])(?![\d])"
)


def _pct(value: str) -> str:
    from .filters import fmt_pct

    return fmt_pct(float(value))


def plain_text(
    text: str,
    label: Callable[[str], str],
    raters: Mapping[str, Mapping[str, str]] | None = None,
) -> str:
    """``text`` with results paths named in words (``label`` names a measure path, as the
    criteria tables do) and rates written as percentages."""

    def path(m: re.Match[str]) -> str:
        group, who, measure = m.group(1), m.group(2), m.group(3)
        if who is None and group != "panel_accuracy" and measure not in _MEASURE_WORDS:
            # "accuracy.agreement" style paths only: leave other dotted words alone
            return m.group(0)
        words = label(f"{group}.{measure}")
        if who and who != "*":
            shown = (raters or {}).get(who, {}).get("display") or who
            words = f"{words} of {shown}"
        return words

    text = _PATH.sub(path, text)
    text = _JUDGED.sub(
        lambda m: f"{m.group(1)}{_pct(m.group(2))}{m.group(3)}{_pct(m.group(4))}", text
    )
    return _RATE.sub(lambda m: f"{m.group(1)}{m.group(2)}{_pct(m.group(3))}", text)


#: measure names that may follow a group directly in a path (``reproducibility.fleiss_kappa``)
_MEASURE_WORDS = {
    "agreement",
    "effectiveness",
    "miss_rate",
    "false_alarm_rate",
    "fleiss_kappa",
    "cohen_kappa",
    "weighted_kappa",
    "krippendorff_alpha",
    "gwet_ac1",
    "gwet_ac2",
    "brennan_prediger",
    "conger_kappa",
    "light_kappa",
    "kendall_w",
    "kendall_tau_b",
    "mixed_calls",
}

_SUB = re.compile(r"\b([A-Za-z]+)_([A-Za-z0-9]+)\b")


def formula_html(line: str) -> Markup:
    """A formula line, escaped, with ``x_i`` set as x with subscript i."""
    return Markup(_SUB.sub(r"\1<sub>\2</sub>", str(escape(line))))
