"""Acceptance criteria, the PASS / IMPROVE verdict, inspector certification and the action list.

The study definition carries its acceptance rules (``criteria:``) and, optionally, the rules an
inspector must meet to be certified (``certification:``).  This module

* parses and checks both against the results of the study (:func:`validate_criteria`): every
  rule names a measure of the results schema that applies to this study, levels are ordered the
  way the measure improves, and a rule judged on an interval bound has an interval to judge;
* judges the results (:func:`judge`) and returns four JSON-ready keys to merge into the results:
  ``"criteria"``, ``"verdict"``, ``"certification"`` and ``"actions"``.

A study may name a shipped criteria set instead of writing rules (``criteria: {set: NAME}``,
see :data:`CRITERIA_SETS`); each set carries its source and a caution that are printed with it.

Conventions (documented in the README, section "Acceptance criteria and certification"):

* ``better: higher`` (the default for everything but miss and false alarm rates): the judged
  value meets at or above ``pass``, is marginal at or above ``marginal``, else short.
  ``better: lower``: meets at or below ``pass``, marginal at or below ``marginal``, else short.
  A value within ``LEVEL_TOLERANCE`` of a level counts as at the level (floating-point noise).
* ``judge: estimate`` judges the point estimate; ``lower_bound`` / ``upper_bound`` the ends of
  the study's interval (two-sided, at the study's ``confidence``); with ``confidence: C`` on a
  rule, the bound is instead the one-sided exact (Clopper-Pearson) bound at ``C`` computed from
  the measure's counts.
* A measure that could not be computed (undefined for these data) or has no interval to judge is
  ``short``: the study has not shown that it meets the rule.
* No criteria: ``"criteria": null`` and a verdict with ``"outcome": null`` and a sentence saying
  that no verdict is given.  No certification rules: ``"certification": null``.

Nothing is rounded here except inside the plain-language sentences.
"""

from __future__ import annotations

import calendar
import dataclasses
import datetime as dt
import difflib
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

from .errors import InputError, Location, Problem
from .model import Study

Better = Literal["higher", "lower"]
Judge = Literal["estimate", "lower_bound", "upper_bound"]

#: a judged value within this distance of a level counts as at the level (floating-point noise)
LEVEL_TOLERANCE = 1e-12

#: default validity of a certification, in months (ending at the end of the last month)
DEFAULT_VALID_MONTHS = 12
#: default number of days before ``valid_until`` at which the register shows an inspector as due
DEFAULT_DUE_WINDOW_DAYS = 30
#: share of a rater's ratings that differ from the reference from which an action is listed
#: (common practice, no source)
RATER_ACTION_SHARE = 0.05
#: share of items on which the ratings do not all agree below which the item set is said to have
#: too few borderline items (common practice, no source)
BORDERLINE_SHARE = 0.20
#: a straddled level needing more than this many times the present items is called impractical
SETTLE_PRACTICAL_FACTOR = 20
#: above this many times the present items, a straddled level is "not settled by a larger study
#: of this design" (issue 12; common practice, no source)
NOT_SETTLED_FACTOR = 10
#: number of hard items named in the action list
HARD_ITEMS_SHOWN = 5

SAFETY_CAUTION = (
    "This characteristic is marked safety-related. The verdict and any certification are an aid "
    "to the decision, not the decision: the customer's requirements, local codes and the "
    "judgement of qualified people come first."
)
GENERAL_CAUTION = (
    "Check these levels against the customer's requirements before relying on the verdict."
)

GROUPS = ("repeatability", "accuracy", "reproducibility", "panel_accuracy")
PER_RATER_GROUPS = ("repeatability", "accuracy")
BY_CATEGORY = "fleiss_kappa_by_category"

RULE_KEYS = ("measure", "pass", "marginal", "better", "judge", "confidence", "note")
CRITERIA_KEYS = ("source", "marginal_is", "rules")
CERTIFICATION_KEYS = ("source", "marginal_is", "rules", "valid_months", "due_window_days")
JUDGES = ("estimate", "lower_bound", "upper_bound")


# --------------------------------------------------------------------------------------------
# The measures a rule may name
# --------------------------------------------------------------------------------------------

#: conditions a measure needs, with the words used when it does not apply
NEEDS_TEXT: dict[str, str] = {
    "trials": "needs at least 2 trials per rater",
    "raters": "needs at least 2 raters",
    "reference": "needs a reference category for the items",
    "defect": "needs a defect category (`defect_category`)",
    "ordinal": "needs an ordinal scale",
    "values": "needs a numeric `value` on every category",
}


@dataclass(frozen=True)
class MeasureInfo:
    """One measure of the results schema that a rule may name."""

    group: str
    name: str
    label: str  # plain words, used in sentences
    kind: Literal["proportion", "coefficient"]
    better: Better = "higher"
    needs: tuple[str, ...] = ()

    @property
    def per_rater(self) -> bool:
        return self.group in PER_RATER_GROUPS

    @property
    def pattern(self) -> str:
        if self.per_rater:
            return f"{self.group}.*.{self.name}"
        if self.name == BY_CATEGORY:
            return f"{self.group}.{self.name}.<code>"
        return f"{self.group}.{self.name}"

    @property
    def bounds(self) -> tuple[float, float]:
        return (0.0, 1.0) if self.kind == "proportion" or self.name == "kendall_w" else (-1.0, 1.0)


def _m(
    group: str, name: str, label: str, kind: str, better: str = "higher", *needs: str
) -> MeasureInfo:
    return MeasureInfo(group, name, label, kind, better, tuple(needs))  # type: ignore[arg-type]


MEASURES: tuple[MeasureInfo, ...] = (
    _m(
        "repeatability",
        "agreement",
        "repeatability agreement rate",
        "proportion",
        "higher",
        "trials",
    ),
    _m(
        "repeatability",
        "fleiss_kappa",
        "repeatability Fleiss' kappa",
        "coefficient",
        "higher",
        "trials",
    ),
    _m(
        "accuracy",
        "agreement",
        "agreement rate with the reference",
        "proportion",
        "higher",
        "reference",
    ),
    _m("accuracy", "effectiveness", "effectiveness", "proportion", "higher", "reference"),
    _m(
        "accuracy",
        "cohen_kappa",
        "Cohen's kappa against the reference",
        "coefficient",
        "higher",
        "reference",
    ),
    _m(
        "accuracy",
        "weighted_kappa",
        "weighted kappa against the reference",
        "coefficient",
        "higher",
        "reference",
        "ordinal",
    ),
    _m("accuracy", "miss_rate", "miss rate", "proportion", "lower", "reference", "defect"),
    _m(
        "accuracy",
        "false_alarm_rate",
        "false alarm rate",
        "proportion",
        "lower",
        "reference",
        "defect",
    ),
    _m(
        "accuracy",
        "exact_agreement",
        "exact agreement with the reference",
        "proportion",
        "higher",
        "reference",
        "ordinal",
    ),
    _m(
        "accuracy",
        "within_one_agreement",
        "agreement within one step of the reference",
        "proportion",
        "higher",
        "reference",
        "ordinal",
    ),
    _m(
        "accuracy",
        "kendall_tau_b",
        "Kendall's tau-b against the reference",
        "coefficient",
        "higher",
        "reference",
        "ordinal",
    ),
    _m(
        "reproducibility",
        "agreement",
        "agreement rate among raters",
        "proportion",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        "fleiss_kappa",
        "Fleiss' kappa among raters",
        "coefficient",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        BY_CATEGORY,
        "Fleiss' kappa of category",
        "coefficient",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        "krippendorff_alpha",
        "Krippendorff's alpha among raters",
        "coefficient",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        "krippendorff_alpha_interval",
        "Krippendorff's alpha (interval) among raters",
        "coefficient",
        "higher",
        "raters",
        "values",
    ),
    _m("reproducibility", "gwet_ac1", "Gwet's AC1 among raters", "coefficient", "higher", "raters"),
    _m(
        "reproducibility",
        "gwet_ac2",
        "Gwet's AC2 among raters",
        "coefficient",
        "higher",
        "raters",
        "ordinal",
    ),
    _m(
        "reproducibility",
        "conger_kappa",
        "Conger's kappa among raters",
        "coefficient",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        "light_kappa",
        "Light's kappa among raters",
        "coefficient",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        "brennan_prediger",
        "Brennan-Prediger coefficient among raters",
        "coefficient",
        "higher",
        "raters",
    ),
    _m(
        "reproducibility",
        "kendall_w",
        "Kendall's W among raters",
        "coefficient",
        "higher",
        "raters",
        "ordinal",
    ),
    _m(
        "panel_accuracy",
        "agreement",
        "panel agreement rate with the reference",
        "proportion",
        "higher",
        "reference",
    ),
    _m(
        "panel_accuracy",
        "effectiveness",
        "panel effectiveness",
        "proportion",
        "higher",
        "reference",
    ),
    _m(
        "panel_accuracy",
        "exact_agreement",
        "panel exact agreement with the reference",
        "proportion",
        "higher",
        "reference",
        "ordinal",
    ),
    _m(
        "panel_accuracy",
        "within_one_agreement",
        "panel agreement within one step of the reference",
        "proportion",
        "higher",
        "reference",
        "ordinal",
    ),
    _m(
        "panel_accuracy",
        "miss_rate",
        "panel miss rate",
        "proportion",
        "lower",
        "reference",
        "defect",
    ),
    _m(
        "panel_accuracy",
        "false_alarm_rate",
        "panel false alarm rate",
        "proportion",
        "lower",
        "reference",
        "defect",
    ),
)
_MEASURE_INDEX: dict[tuple[str, str], MeasureInfo] = {(m.group, m.name): m for m in MEASURES}


def _is_record(x: Any) -> bool:
    return isinstance(x, Mapping) and "estimate" in x


def _design_conditions(study: Study, has_reference: bool | None) -> dict[str, bool | None]:
    """Which measure conditions this study's design meets (``None``: not known yet)."""
    return {
        "trials": study.trials >= 2,
        "raters": len(study.raters) >= 2,
        "reference": has_reference,
        "defect": study.defect_category is not None,
        "ordinal": study.scale == "ordinal",
        "values": bool(study.categories) and all(c.value is not None for c in study.categories),
    }


def _static_unmet(info: MeasureInfo, cond: Mapping[str, bool | None]) -> list[str]:
    return [n for n in info.needs if cond.get(n) is False]


def _present(results: Mapping[str, Any] | None, info: MeasureInfo) -> bool:
    """Whether the results hold at least one record of this measure."""
    if results is None:
        return False
    block = results.get(info.group)
    if not isinstance(block, Mapping):
        return False
    if info.per_rater:
        return any(isinstance(v, Mapping) and _is_record(v.get(info.name)) for v in block.values())
    if info.name == BY_CATEGORY:
        sub = block.get(BY_CATEGORY)
        return isinstance(sub, Mapping) and any(_is_record(v) for v in sub.values())
    return _is_record(block.get(info.name))


def applicable_measures(
    study: Study, results: Mapping[str, Any] | None = None, *, has_reference: bool | None = None
) -> list[str]:
    """The measure paths a rule may name for this study, sorted.

    With results, a measure applies when the results hold it (measures that do not apply are
    absent from the results).  Without results, the study design decides; ``has_reference``
    (from the loaded ratings) settles whether accuracy measures apply.
    """
    if has_reference is None and study.reference_path is not None:
        has_reference = True
    cond = _design_conditions(study, has_reference)
    out = []
    for info in MEASURES:
        if results is not None:
            ok = _present(results, info)
        else:
            ok = not _static_unmet(info, cond) and all(cond.get(n) is not None for n in info.needs)
        if ok:
            out.append(info.pattern)
    return sorted(out)


def _why_absent(study: Study, info: MeasureInfo, has_reference: bool | None) -> str:
    unmet = _static_unmet(info, _design_conditions(study, has_reference))
    if unmet:
        return "; ".join(NEEDS_TEXT[n] for n in unmet)
    return "it was not computed for this study"


# --------------------------------------------------------------------------------------------
# Parsed rules
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Rule:
    """One acceptance rule, parsed and checked (levels ordered, measure known)."""

    index: int  # 1-based position in the rule list (or in the shipped set)
    measure: str  # as written (or as shipped)
    info: MeasureInfo
    target: (
        str | None
    )  # None (panel), "*" (every rater) or a rater id; a category code for by-category
    pass_level: float
    marginal_level: float | None
    better: Better
    judge: Judge
    confidence: float | None = None  # one-sided exact bound at this confidence, from counts
    note: str | None = None

    @property
    def applies_to(self) -> str:
        if self.info.per_rater:
            return "each rater" if self.target == "*" else f"rater {self.target}"
        if self.info.name == BY_CATEGORY:
            return "each category" if self.target == "*" else f"category {self.target}"
        return "panel"

    def basis(self, study_confidence: float) -> str:
        """In words: which number the rule judges."""
        if self.judge == "estimate":
            return "the estimate"
        end = "lower" if self.judge == "lower_bound" else "upper"
        if self.confidence is not None:
            return f"the one-sided {_pct(self.confidence)} exact {end} bound"
        return f"the {end} end of the {_pct(study_confidence)} interval"

    def as_record(self, study_confidence: float) -> dict[str, Any]:
        return {
            "rule": self.index,
            "measure": self.measure,
            "label": self.info.label,
            "applies_to": self.applies_to,
            "better": self.better,
            "pass": self.pass_level,
            "marginal": self.marginal_level,
            "judge": self.judge,
            "judge_basis": self.basis(study_confidence),
            "confidence": self.confidence,
            "note": self.note,
        }


@dataclass(frozen=True)
class CriteriaSet:
    """A criteria set shipped with reportgen, named in a study as ``criteria: {set: NAME}``."""

    name: str
    title: str
    source: str
    caution: str
    rules: tuple[dict[str, Any], ...]  # raw rules, as a study would write them
    params: dict[str, float] = field(default_factory=dict)  # parameters and their defaults
    optional_rules: bool = False  # True: rules that do not apply are left out, not refused
    marginal_is: Literal["pass", "improve"] = "improve"


KAPPA_BANDS = CriteriaSet(
    name="kappa-bands",
    title="Kappa bands 0.75 / 0.40",
    source=(
        "Kappa of at least 0.75 meets, 0.40 up to 0.75 is marginal, below 0.40 is short, "
        "as in common automotive practice (common practice, no source)."
    ),
    caution=(
        "These bands are a rule of thumb of the trade, not a published standard, and they judge "
        "point estimates. " + GENERAL_CAUTION
    ),
    rules=(
        {"measure": "repeatability.*.fleiss_kappa", "pass": 0.75, "marginal": 0.40},
        {"measure": "accuracy.*.cohen_kappa", "pass": 0.75, "marginal": 0.40},
        {"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "marginal": 0.40},
    ),
    optional_rules=True,
)

BINARY_INSPECTION = CriteriaSet(
    name="binary-inspection",
    title="Accept/reject inspection rates 90/2/5",
    source=(
        "Effectiveness at least 90 % (marginal from 80 %), miss rate at most 2 % (marginal up to "
        "5 %), false alarm rate at most 5 % (marginal up to 10 %) for each rater, as widely used "
        "in automotive attribute studies. Values from memory, verify against your copy of the "
        "reference manual."
    ),
    caution=(
        "The levels are quoted from memory, not from the manual itself: verify them against "
        "your copy of the reference manual and the customer's requirements before relying on "
        "the verdict."
    ),
    rules=(
        {"measure": "accuracy.*.effectiveness", "pass": 0.90, "marginal": 0.80},
        {"measure": "accuracy.*.miss_rate", "pass": 0.02, "marginal": 0.05, "better": "lower"},
        {
            "measure": "accuracy.*.false_alarm_rate",
            "pass": 0.05,
            "marginal": 0.10,
            "better": "lower",
        },
    ),
)

MISS_RATE_BOUND = CriteriaSet(
    name="miss-rate-bound",
    title="Risk-based miss rate bound",
    source=(
        "Risk-based acceptance as in test-method validation for medical devices: for each "
        "rater, the one-sided exact upper confidence bound of the miss rate at the stated "
        "confidence must not exceed the limit chosen from the risk of the characteristic "
        "(common practice, no source). With no misses, n = ln(1 - C) / ln(R) ratings of defect "
        "items (R = 1 - limit, C = confidence) are needed to show it."
    ),
    caution=(
        "Choose the limit and the confidence from the risk analysis of the characteristic and "
        "the customer's requirements; the defaults (limit 0.05, confidence 0.95) are examples, "
        "not a recommendation. The miss rate counts every rating of a defect item; repeated "
        "ratings of one item are not independent, so with several trials the bound is "
        "optimistic: size the study on distinct defect items."
    ),
    rules=(
        {
            "measure": "accuracy.*.miss_rate",
            "pass": "$limit",
            "better": "lower",
            "judge": "upper_bound",
            "confidence": "$confidence",
        },
    ),
    params={"limit": 0.05, "confidence": 0.95},
)

#: the criteria sets shipped with reportgen, by name
CRITERIA_SETS: dict[str, CriteriaSet] = {
    s.name: s for s in (KAPPA_BANDS, BINARY_INSPECTION, MISS_RATE_BOUND)
}


@dataclass(frozen=True)
class Criteria:
    """The acceptance criteria of a study, parsed."""

    source: str
    marginal_is: Literal["pass", "improve"]
    rules: tuple[Rule, ...]
    set: CriteriaSet | None = None
    params: dict[str, float] = field(default_factory=dict)
    left_out: tuple[tuple[str, str], ...] = ()  # (measure, reason) of set rules that do not apply


@dataclass(frozen=True)
class Certification:
    """The certification rules of a study, parsed."""

    rules: tuple[Rule, ...]
    marginal_is: Literal["pass", "improve"] = "improve"
    valid_months: int = DEFAULT_VALID_MONTHS
    due_window_days: int = DEFAULT_DUE_WINDOW_DAYS
    source: str | None = None


# --------------------------------------------------------------------------------------------
# Parsing
# --------------------------------------------------------------------------------------------


def _format_key(keys: Sequence[Any]) -> str:
    from .yamlio import format_key

    return format_key(keys)


class _Parser:
    """Collects problems while reading ``criteria`` / ``certification``."""

    def __init__(self, study: Study, results: Mapping[str, Any] | None, has_reference: bool | None):
        self.study = study
        self.results = results
        if has_reference is None and results is not None:
            has_reference = isinstance(results.get("accuracy"), Mapping) and bool(
                results["accuracy"]
            )
        if has_reference is None and study.reference_path is not None:
            has_reference = True
        self.has_reference = has_reference
        self.problems: list[Problem] = []

    # -- messages ---------------------------------------------------------------------------
    def error(
        self, keys: Sequence[Any], message: str, hint: str | None = None, *, severity: str = "error"
    ) -> None:
        loc = self.study.locate(*keys)
        self.problems.append(
            Problem(
                Location(loc.path, loc.line, loc.column, _format_key(keys)), message, hint, severity
            )
        )

    def unknown_keys(
        self, keys: Sequence[Any], data: Mapping[str, Any], allowed: Sequence[str]
    ) -> None:
        for k in sorted(data, key=str):
            if k in allowed:
                continue
            close = difflib.get_close_matches(str(k), allowed, n=1)
            hint = f"did you mean '{close[0]}'?" if close else f"allowed keys: {', '.join(allowed)}"
            self.error([*keys, k], f"unknown key '{k}'", hint)

    # -- values -----------------------------------------------------------------------------
    def number(self, keys: Sequence[Any], value: Any) -> float | None:
        if (
            isinstance(value, bool)
            or not isinstance(value, int | float)
            or not math.isfinite(value)
        ):
            self.error(keys, f"must be a number, got {value!r}")
            return None
        return float(value)

    def choice(self, keys: Sequence[Any], value: Any, options: Sequence[str], default: str) -> str:
        if value is None:
            return default
        if value not in options:
            close = difflib.get_close_matches(str(value), options, n=1)
            hint = f"did you mean '{close[0]}'?" if close else None
            self.error(keys, f"must be one of {', '.join(options)}; got {value!r}", hint)
            return default
        return str(value)

    def marginal_is(self, keys: Sequence[Any], value: Any) -> Literal["pass", "improve"]:
        return (
            "pass"
            if self.choice(keys, value, ("improve", "pass"), "improve") == "pass"
            else "improve"
        )

    # -- measures ---------------------------------------------------------------------------
    def applicable(self, *, per_rater_only: bool = False) -> list[str]:
        out = applicable_measures(self.study, self.results, has_reference=self.has_reference)
        if per_rater_only:
            out = [m for m in out if m.split(".")[0] in PER_RATER_GROUPS]
        return out

    def measure(
        self, keys: Sequence[Any], text: Any, *, certification: bool = False
    ) -> tuple[MeasureInfo, str | None] | None:
        """Resolve a measure path; ``None`` (and a problem) when unknown or not applicable."""
        listing = self.applicable(per_rater_only=certification)
        shown = (
            ", ".join((m.replace(".*.", ".") if certification else m) for m in listing) or "none"
        )
        hint = f"measures that apply to this study: {shown}"
        if not isinstance(text, str) or not text.strip():
            self.error(keys, "must name a measure, e.g. 'reproducibility.fleiss_kappa'", hint)
            return None
        parts = text.strip().split(".")
        group = parts[0]
        info: MeasureInfo | None = None
        target: str | None = None
        if group in PER_RATER_GROUPS and len(parts) >= 2:
            name = parts[-1]
            middle = ".".join(parts[1:-1])
            info = _MEASURE_INDEX.get((group, name))
            if info is not None:
                if certification and middle not in ("", "*"):
                    self.error(
                        keys,
                        f"certification rules apply to every inspector; write "
                        f"'{group}.{name}' without the rater '{middle}'",
                    )
                    return None
                if middle == "" and not certification:
                    self.error(
                        keys,
                        f"'{text}' needs a rater: '{group}.*.{name}' for every rater "
                        f"or '{group}.<rater>.{name}' for one",
                    )
                    return None
                target = "*" if middle in ("", "*") else middle
                if target != "*" and target not in self.study.rater_ids:
                    self.error(
                        keys,
                        f"unknown rater '{target}' in '{text}'",
                        f"raters of this study: {', '.join(self.study.rater_ids)}",
                    )
                    return None
        elif group in GROUPS and len(parts) >= 2:
            if parts[1] == BY_CATEGORY and len(parts) >= 3:
                info = _MEASURE_INDEX[(group, BY_CATEGORY)]
                target = ".".join(parts[2:])
                if target != "*" and target not in self.study.category_codes:
                    self.error(
                        keys,
                        f"unknown category '{target}' in '{text}'",
                        f"categories of this study: {', '.join(self.study.category_codes)}",
                    )
                    return None
            elif len(parts) == 2:
                info = _MEASURE_INDEX.get((group, parts[1]))
        if info is None:
            close = difflib.get_close_matches(text.strip(), listing, n=1)
            self.error(
                keys,
                f"unknown measure '{text}'",
                (f"did you mean '{close[0]}'? " if close else "") + hint,
            )
            return None
        if certification and not info.per_rater:
            self.error(
                keys,
                f"'{text}' is a figure of the whole panel; certification rules use "
                f"each inspector's own figures",
                hint,
            )
            return None
        if info.pattern not in listing:
            why = _why_absent(self.study, info, self.has_reference)
            self.error(keys, f"measure '{text}' does not apply to this study: {why}", hint)
            return None
        if self.results is not None and target not in (None, "*"):
            if _lookup(self.results, info, target) is None:
                self.error(keys, f"measure '{text}' is not in the results of this study", hint)
                return None
        return info, target

    # -- rules ------------------------------------------------------------------------------
    def rule(
        self, keys: Sequence[Any], data: Any, index: int, *, certification: bool = False
    ) -> Rule | None:
        if not isinstance(data, Mapping):
            self.error(
                keys,
                "a rule must be a mapping with 'measure' and 'pass'",
                "e.g. {measure: reproducibility.fleiss_kappa, pass: 0.75, marginal: 0.40}",
            )
            return None
        self.unknown_keys(keys, data, RULE_KEYS)
        ok = True
        if "measure" not in data:
            self.error(keys, "missing key 'measure'", "name the measure this rule judges")
            return None
        resolved = self.measure(
            [*keys, "measure"], data.get("measure"), certification=certification
        )
        if resolved is None:
            return None
        info, target = resolved
        better_default = info.better
        better_raw = data.get("better")
        better: Better = (
            "lower"
            if self.choice([*keys, "better"], better_raw, ("higher", "lower"), better_default)
            == "lower"
            else "higher"
        )
        if better_raw in ("higher", "lower") and better != info.better:
            self.error(
                [*keys, "better"],
                f"for the {info.label}, {info.better} is better; 'better: {better}' would "
                f"reward the wrong direction",
                f"write 'better: {info.better}' or leave it out",
            )
            ok = False
        judge: Judge = self.choice([*keys, "judge"], data.get("judge"), JUDGES, "estimate")  # type: ignore[assignment]
        if "pass" not in data:
            self.error(keys, "missing key 'pass'", "the level at which the rule is met")
            return None
        pass_level = self.number([*keys, "pass"], data.get("pass"))
        marginal_level = None
        if data.get("marginal") is not None:
            marginal_level = self.number([*keys, "marginal"], data.get("marginal"))
            if marginal_level is None:
                ok = False
        if pass_level is None:
            return None
        lo, hi = info.bounds
        for name, level in (("pass", pass_level), ("marginal", marginal_level)):
            if level is not None and not (lo <= level <= hi):
                self.error(
                    [*keys, name],
                    f"{level:g} is outside the range of the {info.label} ({lo:g} to {hi:g})",
                )
                ok = False
        if marginal_level is not None:
            if better == "higher" and not marginal_level < pass_level:
                self.error(
                    [*keys, "marginal"],
                    f"with 'better: higher' the marginal level ({marginal_level:g}) must be "
                    f"below the pass level ({pass_level:g})",
                    "leave 'marginal' out for a rule without a marginal band",
                )
                ok = False
            if better == "lower" and not marginal_level > pass_level:
                self.error(
                    [*keys, "marginal"],
                    f"with 'better: lower' the marginal level ({marginal_level:g}) must be "
                    f"above the pass level ({pass_level:g})",
                    "leave 'marginal' out for a rule without a marginal band",
                )
                ok = False
        confidence = None
        if data.get("confidence") is not None:
            confidence = self.number([*keys, "confidence"], data.get("confidence"))
            if confidence is None:
                ok = False
            elif not 0.5 < confidence < 1.0:
                self.error([*keys, "confidence"], f"must lie between 0.5 and 1, got {confidence:g}")
                ok = False
            elif judge == "estimate":
                self.error(
                    [*keys, "confidence"],
                    "a stated confidence needs 'judge: lower_bound' or 'judge: upper_bound'",
                )
                ok = False
            elif info.kind != "proportion":
                self.error(
                    [*keys, "confidence"],
                    f"a one-sided bound at a stated confidence is computed from counts, for "
                    f"rates and agreement shares only; the {info.label} is not one",
                    "leave 'confidence' out to judge the study's interval",
                )
                ok = False
        if judge != "estimate" and confidence is None and self.results is not None:
            if not _has_interval(self.results, info, target):
                self.error(
                    [*keys, "judge"],
                    f"'judge: {judge}' needs an interval, and the {info.label} has none in "
                    f"the results of this study",
                    "judge the estimate, or give the study bootstrap resamples",
                )
                ok = False
        if judge != "estimate":
            optimistic = (judge == "upper_bound") == (better == "higher")
            if optimistic:
                safer = "lower_bound" if better == "higher" else "upper_bound"
                self.error(
                    [*keys, "judge"],
                    f"'judge: {judge}' gives the {info.label} the benefit of the doubt "
                    f"(the favourable end of the interval)",
                    f"'judge: {safer}' asks the study to show the level with confidence",
                    severity="warning",
                )
        note = data.get("note")
        if note is not None and not isinstance(note, str):
            self.error([*keys, "note"], "must be text")
            ok = False
        if not ok:
            return None
        return Rule(
            index=index,
            measure=str(data["measure"]).strip(),
            info=info,
            target=target,
            pass_level=pass_level,
            marginal_level=marginal_level,
            better=better,
            judge=judge,
            confidence=confidence,
            note=note,
        )

    def rules(self, keys: Sequence[Any], data: Any, *, certification: bool = False) -> list[Rule]:
        if not isinstance(data, list) or not data:
            self.error(
                keys,
                "must be a non-empty list of rules",
                "e.g. - {measure: reproducibility.fleiss_kappa, pass: 0.75, marginal: 0.40}",
            )
            return []
        out = []
        for i, item in enumerate(data):
            r = self.rule([*keys, i], item, i + 1, certification=certification)
            if r is not None:
                out.append(r)
        return out

    # -- criteria ---------------------------------------------------------------------------
    def criteria(self, data: Any) -> Criteria | None:
        keys: list[Any] = ["criteria"]
        if not isinstance(data, Mapping):
            self.error(
                keys,
                "must be a mapping with 'source' and 'rules', or {set: NAME}",
                f"shipped sets: {', '.join(sorted(CRITERIA_SETS))}",
            )
            return None
        if "set" in data:
            return self.criteria_set(keys, data)
        self.unknown_keys(keys, data, CRITERIA_KEYS)
        source = data.get("source")
        if not isinstance(source, str) or not source.strip():
            self.error(
                [*keys, "source"] if "source" in data else keys,
                "say where these acceptance levels come from"
                if "source" not in data
                else "must be text naming where the levels come from",
                'e.g. source: "Customer requirement CR-7, section 4"',
            )
        marginal_is = self.marginal_is([*keys, "marginal_is"], data.get("marginal_is"))
        if "rules" not in data:
            self.error(keys, "missing key 'rules'", "list the acceptance rules, or name a set")
            return None
        n_before = len(self.problems)
        rules = self.rules([*keys, "rules"], data["rules"])
        if any(p.severity == "error" for p in self.problems[n_before:]) or not isinstance(
            source, str
        ):
            return None
        return Criteria(source=source.strip(), marginal_is=marginal_is, rules=tuple(rules))

    def criteria_set(self, keys: list[Any], data: Mapping[str, Any]) -> Criteria | None:
        name = data.get("set")
        cs = CRITERIA_SETS.get(name) if isinstance(name, str) else None
        if cs is None:
            close = difflib.get_close_matches(str(name), sorted(CRITERIA_SETS), n=1)
            self.error(
                [*keys, "set"],
                f"unknown criteria set {name!r}",
                (f"did you mean '{close[0]}'? " if close else "")
                + f"shipped sets: {', '.join(sorted(CRITERIA_SETS))}",
            )
            return None
        allowed = ("set", "marginal_is", *sorted(cs.params))
        for own in ("source", "rules"):
            if own in data:
                self.error(
                    [*keys, own],
                    f"unknown key '{own}' next to 'set'",
                    "a shipped set carries its own source and rules; leave out 'set' to "
                    "write your own",
                )
        self.unknown_keys(
            keys, {k: v for k, v in data.items() if k not in ("source", "rules")}, allowed
        )
        marginal_is = self.marginal_is(
            [*keys, "marginal_is"], data.get("marginal_is", cs.marginal_is)
        )
        params: dict[str, float] = {}
        for p, default in sorted(cs.params.items()):
            v = data.get(p, default)
            num = self.number([*keys, p], v)
            if num is None:
                continue
            if not 0.0 < num < 1.0 or (p == "confidence" and num <= 0.5):
                self.error(
                    [*keys, p],
                    f"must lie strictly between {0.5 if p == 'confidence' else 0:g} and 1, got {num:g}",
                )
                continue
            params[p] = num
        if len(params) != len(cs.params):
            return None
        rules: list[Rule] = []
        left_out: list[tuple[str, str]] = []
        refused: list[str] = []
        for i, raw in enumerate(cs.rules):
            raw = {
                k: (params[v[1:]] if isinstance(v, str) and v.startswith("$") else v)
                for k, v in raw.items()
            }
            if self.study.safety_related and raw.get("better") == "lower" and "judge" not in raw:
                # safety-related: a rate is judged on its one-sided exact upper bound
                raw = {**raw, "judge": "upper_bound", "confidence": self.study.confidence}
            sub = _Parser(self.study, self.results, self.has_reference)
            r = sub.rule([*keys, "set"], raw, i + 1)
            errors = [p for p in sub.problems if p.severity == "error"]
            if r is not None and not errors:
                rules.append(r)
            elif cs.optional_rules:
                left_out.append((raw["measure"], errors[0].message if errors else "does not apply"))
            else:
                for p in errors:
                    why = (
                        p.message.split(": ", 1)[-1] if "does not apply" in p.message else p.message
                    )
                    if why not in refused:
                        refused.append(why)
        if refused:
            self.error(
                [*keys, "set"],
                f"the criteria set '{cs.name}' does not apply to this study: {'; '.join(refused)}",
                f"write your own rules instead; measures that apply: "
                f"{', '.join(self.applicable()) or 'none'}",
            )
        if not rules and not any(p.severity == "error" for p in self.problems):
            self.error(
                [*keys, "set"],
                f"no rule of the criteria set '{cs.name}' applies to this study",
                f"measures that apply: {', '.join(self.applicable()) or 'none'}",
            )
        if any(p.severity == "error" for p in self.problems):
            return None
        # rule numbers follow the rules kept
        rules = [dataclasses.replace(r, index=i + 1) for i, r in enumerate(rules)]
        return Criteria(
            source=cs.source,
            marginal_is=marginal_is,
            rules=tuple(rules),
            set=cs,
            params=params,
            left_out=tuple(sorted(left_out)),
        )

    # -- certification ----------------------------------------------------------------------
    def certification(self, data: Any) -> Certification | None:
        keys: list[Any] = ["certification"]
        if not isinstance(data, Mapping):
            self.error(
                keys,
                "must be a mapping with 'rules'",
                "e.g. certification: {valid_months: 12, rules: [{measure: repeatability.agreement, pass: 0.9}]}",
            )
            return None
        self.unknown_keys(keys, data, CERTIFICATION_KEYS)
        n_before = len(self.problems)
        if self.study.date is None:
            self.error(
                keys,
                "certification needs the study date (`study.date`): it is the certification date",
                "add e.g. 'date: 2026-11-20' under 'study'",
            )
        valid_months = DEFAULT_VALID_MONTHS
        if "valid_months" in data:
            v = data["valid_months"]
            if isinstance(v, bool) or not isinstance(v, int) or not 1 <= v <= 120:
                self.error(
                    [*keys, "valid_months"],
                    f"must be a whole number of months from 1 to 120, got {v!r}",
                )
            else:
                valid_months = v
        due = DEFAULT_DUE_WINDOW_DAYS
        if "due_window_days" in data:
            v = data["due_window_days"]
            if isinstance(v, bool) or not isinstance(v, int) or not 0 <= v <= 366:
                self.error(
                    [*keys, "due_window_days"],
                    f"must be a whole number of days from 0 to 366, got {v!r}",
                )
            else:
                due = v
        source = data.get("source")
        if not isinstance(source, str) or not source.strip():
            self.error(
                [*keys, "source"] if "source" in data else keys,
                "say where these certification levels come from"
                if "source" not in data
                else "must be text naming where the levels come from",
                'e.g. source: "Inspector qualification procedure QP-12, section 3"',
            )
        marginal_is = self.marginal_is([*keys, "marginal_is"], data.get("marginal_is"))
        if "rules" not in data:
            self.error(keys, "missing key 'rules'", "list the rules each inspector must meet")
            return None
        rules = self.rules([*keys, "rules"], data["rules"], certification=True)
        if any(p.severity == "error" for p in self.problems[n_before:]):
            return None
        return Certification(
            rules=tuple(rules),
            marginal_is=marginal_is,
            valid_months=valid_months,
            due_window_days=due,
            source=source.strip() if isinstance(source, str) else None,
        )


def _parse(
    study: Study, results: Mapping[str, Any] | None, has_reference: bool | None
) -> tuple[Criteria | None, Certification | None, list[Problem]]:
    parser = _Parser(study, results, has_reference)
    criteria = parser.criteria(study.criteria) if study.criteria is not None else None
    certification = (
        parser.certification(study.certification) if study.certification is not None else None
    )
    if criteria is not None and certification is not None:
        from .certify import loosening_problems

        parser.problems.extend(loosening_problems(study, criteria, certification))
    if certification is not None or criteria is not None:
        from .certify import independence_problems

        parser.problems.extend(independence_problems(study))
    return criteria, certification, parser.problems


def validate_criteria(
    study: Study, results: Mapping[str, Any] | None = None, *, has_reference: bool | None = None
) -> list[Problem]:
    """Check ``study.criteria`` and ``study.certification``; return every problem found.

    With ``results`` (the analysis output), measures apply when the results hold them and bound
    judging is checked against the intervals present.  Without results (``reportgen check``
    before any statistics), the study design decides; pass ``has_reference`` from the loaded
    ratings.  Problems of severity ``"warning"`` do not stop the verdict.
    """
    return _parse(study, results, has_reference)[2]


def load_criteria(
    study: Study, results: Mapping[str, Any] | None = None, *, has_reference: bool | None = None
) -> tuple[Criteria | None, Certification | None]:
    """Parsed criteria and certification; raises :class:`InputError` on any error."""
    criteria, certification, problems = _parse(study, results, has_reference)
    errors = [p for p in problems if p.severity == "error"]
    if errors:
        raise InputError(errors)
    return criteria, certification


# --------------------------------------------------------------------------------------------
# Judging
# --------------------------------------------------------------------------------------------


def _lookup(
    results: Mapping[str, Any], info: MeasureInfo, target: str | None
) -> Mapping[str, Any] | None:
    block = results.get(info.group)
    if not isinstance(block, Mapping):
        return None
    if info.per_rater:
        sub = block.get(target)
        rec = sub.get(info.name) if isinstance(sub, Mapping) else None
    elif info.name == BY_CATEGORY:
        sub = block.get(BY_CATEGORY)
        rec = sub.get(target) if isinstance(sub, Mapping) else None
    else:
        rec = block.get(info.name)
    return rec if _is_record(rec) else None


def _targets(study: Study, results: Mapping[str, Any], rule: Rule) -> list[str | None]:
    if rule.target != "*":
        return [rule.target]
    if rule.info.per_rater:
        return sorted(study.rater_ids)
    sub = results.get(rule.info.group, {}).get(BY_CATEGORY, {})
    return sorted(c for c in study.category_codes if c in sub)


def _has_interval(results: Mapping[str, Any], info: MeasureInfo, target: str | None) -> bool:
    block = results.get(info.group)
    if not isinstance(block, Mapping):
        return False
    if target != "*":
        recs = [_lookup(results, info, target)]
    elif info.per_rater:
        recs = [_lookup(results, info, t) for t in block]
    else:
        recs = [_lookup(results, info, t) for t in block.get(BY_CATEGORY, {})]
    return any(
        r is not None and r.get("ci_low") is not None and r.get("ci_high") is not None for r in recs
    )


def _num(x: Any) -> float | None:
    if isinstance(x, bool) or not isinstance(x, int | float) or not math.isfinite(x):
        return None
    return float(x)


def _pct(x: float) -> str:
    return f"{x * 100:g} %"


def _fmt(x: float | None) -> str:
    return "n/a" if x is None else f"{x:.3g}"


def outcome_of(value: float, rule: Rule) -> Literal["meets", "marginal", "short"]:
    """``meets`` / ``marginal`` / ``short`` for a judged value (at a level counts as reaching it)."""
    sign = 1.0 if rule.better == "higher" else -1.0
    if sign * (value - rule.pass_level) >= -LEVEL_TOLERANCE:
        return "meets"
    if rule.marginal_level is not None and sign * (value - rule.marginal_level) >= -LEVEL_TOLERANCE:
        return "marginal"
    return "short"


def _one_sided_bound(rec: Mapping[str, Any], rule: Rule) -> tuple[float | None, str | None]:
    """One-sided exact bound at the rule's confidence from the record's counts."""
    from .stats.proportion import clopper_pearson_interval

    est = _num(rec.get("estimate"))
    n = rec.get("items")
    if est is None or not isinstance(n, int) or n <= 0:
        return None, "the counts behind this rate are not in the results"
    x = est * n
    if abs(x - round(x)) > 1e-6 * max(1.0, n):
        return None, "the counts behind this rate are not whole numbers"
    assert rule.confidence is not None
    low, high = clopper_pearson_interval(int(round(x)), n, 2.0 * rule.confidence - 1.0)
    return (high if rule.judge == "upper_bound" else low), None


def _settle(
    rec: Mapping[str, Any], rule: Rule, value: float, design_items: int | None
) -> dict[str, Any] | None:
    """When the uncertainty straddles a level: how many items would settle it (same mix of items).

    Judging the estimate, a level is straddled when it lies inside the interval; judging a bound,
    when the estimate is on the good side of the level and the judged bound is not.  The items
    needed come from square-root scaling of the half-width on the side of the level (see
    ``reportgen.stats.caveats.items_needed``).
    """
    from .stats.caveats import items_needed

    est, lo, hi = _num(rec.get("estimate")), _num(rec.get("ci_low")), _num(rec.get("ci_high"))
    if est is None:
        return None
    sign = 1.0 if rule.better == "higher" else -1.0
    levels = [rule.pass_level] + ([rule.marginal_level] if rule.marginal_level is not None else [])
    n = design_items if isinstance(design_items, int) and design_items > 0 else rec.get("items")
    out: list[dict[str, Any]] = []
    for lv in levels:
        if rule.judge == "estimate":
            if lo is None or hi is None or not lo < lv < hi:
                continue
            side = (est - lo) if lv < est else (hi - est)
        else:
            if not (sign * (est - lv) > LEVEL_TOLERANCE and sign * (value - lv) < -LEVEL_TOLERANCE):
                continue
            side = abs(est - value)
        gap = abs(est - lv)
        ok = gap > LEVEL_TOLERANCE and isinstance(n, int) and n > 0
        out.append({"level": lv, "items_needed": items_needed(side, n, gap) if ok else None})
    if not out:
        return None
    headline = out[0]  # the pass level when it is straddled, else the marginal level
    if not (isinstance(n, int) and n > 0):
        text = "more items would settle it"
    elif headline["items_needed"] is None:
        text = (
            "the interval straddles the level and the estimate sits on it: more items alone "
            "are unlikely to settle it"
        )
    elif headline["items_needed"] > NOT_SETTLED_FACTOR * n:
        text = (
            f"not settled by a larger study of this design: it would take more than "
            f"{NOT_SETTLED_FACTOR} times the present {n} items; a tighter inspection procedure "
            f"or more items near the decision (e.g. more defect items) would settle it sooner"
        )
    else:
        text = (
            f"more items would settle it: about {headline['items_needed']} items in all "
            f"(now {n}), with the same mix of items"
        )
    return {
        "levels": out,
        "items_now": n,
        "items_needed": headline["items_needed"],
        "text": text,
        "basis": "square-root scaling of the present interval half-width on the side of the level",
    }


def _check(
    rule: Rule,
    rec: Mapping[str, Any] | None,
    target: str | None,
    *,
    design_items: int | None,
    study_confidence: float,
) -> dict[str, Any]:
    """Judge one rule for one rater / category / the panel."""
    if rule.info.per_rater:
        path = f"{rule.info.group}.{target}.{rule.info.name}"
    elif rule.info.name == BY_CATEGORY:
        path = f"{rule.info.group}.{BY_CATEGORY}.{target}"
    else:
        path = f"{rule.info.group}.{rule.info.name}"
    entry: dict[str, Any] = {
        "rule": rule.index,
        "measure": path,
        "label": rule.info.label,
        "rater": target if rule.info.per_rater else None,
        "category": target if rule.info.name == BY_CATEGORY else None,
        "better": rule.better,
        "judge": rule.judge,
        "pass": rule.pass_level,
        "marginal": rule.marginal_level,
        "level": rule.pass_level,
        "estimate": None,
        "ci_low": None,
        "ci_high": None,
        "ci_method": None,
        "items": None,
        "value": None,
        "margin": None,
        "outcome": "short",
        "settle": None,
        "note": None,
    }
    if rec is None:
        entry["note"] = "not in the results for this study: the rule cannot be shown to hold"
        return entry
    est = _num(rec.get("estimate"))
    entry.update(
        estimate=est,
        ci_low=_num(rec.get("ci_low")),
        ci_high=_num(rec.get("ci_high")),
        ci_method=rec.get("ci_method"),
        items=rec.get("items"),
    )
    if est is None:
        entry["note"] = (
            "undefined for these data (see the warnings): the rule cannot be shown to hold"
        )
        return entry
    if rule.judge == "estimate":
        value: float | None = est
    elif rule.confidence is not None:
        value, why = _one_sided_bound(rec, rule)
        entry["ci_method"] = f"one-sided exact (Clopper-Pearson 1934) at {_pct(rule.confidence)}"
        if value is None:
            entry["note"] = f"no bound: {why}"
            return entry
        if rule.judge == "upper_bound":
            entry["ci_low"], entry["ci_high"] = 0.0, value
        else:
            entry["ci_low"], entry["ci_high"] = value, 1.0
    else:
        value = entry["ci_low"] if rule.judge == "lower_bound" else entry["ci_high"]
        if value is None:
            entry["note"] = "no interval for these data: the rule cannot be shown to hold"
            return entry
    assert value is not None
    sign = 1.0 if rule.better == "higher" else -1.0
    entry["value"] = value
    entry["outcome"] = outcome_of(value, rule)
    entry["margin"] = sign * (value - rule.pass_level)
    # items needed only where it helps: never beside a check that already meets
    entry["settle"] = (
        None
        if entry["outcome"] == "meets"
        else _settle(
            {**rec, "ci_low": entry["ci_low"], "ci_high": entry["ci_high"]},
            rule,
            value,
            design_items,
        )
    )
    return entry


def _design_items(results: Mapping[str, Any]) -> int | None:
    d = results.get("design")
    n = d.get("items") if isinstance(d, Mapping) else None
    return n if isinstance(n, int) and not isinstance(n, bool) else None


def _judge_rules(
    study: Study, results: Mapping[str, Any], rules: Sequence[Rule]
) -> list[dict[str, Any]]:
    out = []
    n = _design_items(results)
    for rule in rules:
        for t in _targets(study, results, rule):
            rec = _lookup(results, rule.info, t)
            out.append(_check(rule, rec, t, design_items=n, study_confidence=study.confidence))
    out.sort(key=lambda e: (e["rule"], e["rater"] or "", e["category"] or ""))
    return out


def _who(entry: Mapping[str, Any]) -> str:
    if entry["rater"] is not None:
        return f"the {entry['label']} of {entry['rater']}"
    if entry["category"] is not None:
        return f"the {entry['label']} {entry['category']}"
    return f"the {entry['label']}"


def _verdict_sentence(outcome: str, checks: Sequence[Mapping[str, Any]], marginal_is: str) -> str:
    n = len(checks)
    if n == 0:
        return "IMPROVE: no criterion could be checked against the results of this study."
    short = [c for c in checks if c["outcome"] == "short"]
    marginal = [c for c in checks if c["outcome"] == "marginal"]
    noun = "criterion check" if n == 1 else "criterion checks"
    if outcome == "PASS":
        if not marginal:
            return (
                f"PASS: all {n} {noun} meet their pass levels."
                if n > 1
                else f"PASS: the {noun} meets its pass level."
            )
        return (
            f"PASS: {n - len(marginal)} of {n} {noun} meet their pass levels and "
            f"{len(marginal)} {'is' if len(marginal) == 1 else 'are'} marginal, which these "
            f"criteria accept."
        )
    parts = []
    if short:
        parts.append(f"{len(short)} of {n} {noun} {'falls' if len(short) == 1 else 'fall'} short")
    if marginal and marginal_is == "improve":
        verb = "is" if len(marginal) == 1 else "are"
        parts.append(
            f"{len(marginal)} {verb} marginal"
            if short
            else f"{len(marginal)} of {n} {noun} {verb} marginal"
        )

    def badness(c: Mapping[str, Any]) -> tuple[int, float, str]:
        rank = 0 if c["outcome"] == "short" else 1
        return (rank, c["margin"] if c["margin"] is not None else -math.inf, c["measure"])

    worst = min(short + (marginal if marginal_is == "improve" else []), key=badness)
    if worst["value"] is None:
        tail = f"{_who(worst)} could not be judged"
    else:
        basis = (
            "estimate"
            if worst["judge"] == "estimate"
            else ("lower bound" if worst["judge"] == "lower_bound" else "upper bound")
        )
        tail = (
            f"the furthest from its pass level is {_who(worst)}, {basis} {_fmt(worst['value'])} "
            f"against {_fmt(worst['pass'])}"
        )
    return f"IMPROVE: {' and '.join(parts)}; {tail}."


def _end_of_month_after(start: dt.date, months: int) -> dt.date:
    """The last day of the month ``months`` months after ``start``'s month."""
    total = start.year * 12 + (start.month - 1) + months
    year, month = divmod(total, 12)
    month += 1
    return dt.date(year, month, calendar.monthrange(year, month)[1])


def valid_until(certified_on: dt.date, valid_months: int = DEFAULT_VALID_MONTHS) -> dt.date:
    """Certification end: the end of the month ``valid_months`` after the certification date."""
    return _end_of_month_after(certified_on, valid_months)


def _counts_ok(outcome: str, marginal_is: str) -> bool:
    return outcome == "meets" or (outcome == "marginal" and marginal_is == "pass")


def _certify(
    study: Study,
    results: Mapping[str, Any],
    cert: Certification,
    criteria_checks: Sequence[Mapping[str, Any]] = (),
    criteria_marginal_is: str = "improve",
) -> dict[str, Any]:
    from .certify import criteria_reasons, demonstrability_note, independence_notes

    checks = _judge_rules(study, results, cert.rules)
    for c in checks:
        c["demonstrable"] = demonstrability_note(c, study.confidence)
    names = {r.id: r.name for r in study.raters}
    conflicts = independence_notes(study)
    inspectors = []
    for rid in sorted(study.rater_ids):
        mine = [c for c in checks if c["rater"] == rid]
        from_criteria = [c for c in criteria_checks if c.get("rater") == rid]
        criteria_ok = all(_counts_ok(c["outcome"], criteria_marginal_is) for c in from_criteria)
        ok = (
            bool(mine)
            and all(_counts_ok(c["outcome"], cert.marginal_is) for c in mine)
            and criteria_ok
        )
        reasons = criteria_reasons(from_criteria, criteria_marginal_is)
        for c in mine:
            side = "at or above" if c["better"] == "higher" else "at or below"
            basis = {
                "estimate": "estimate",
                "lower_bound": "lower bound",
                "upper_bound": "upper bound",
            }[c["judge"]]
            if c["value"] is None:
                reasons.append(f"{c['label']}: could not be judged ({c['note']})")
            elif c["outcome"] == "meets":
                reasons.append(
                    f"{c['label']} {basis} {_fmt(c['value'])} is {side} {_fmt(c['pass'])}"
                )
            elif c["outcome"] == "marginal":
                accepted = "accepted" if cert.marginal_is == "pass" else "not enough"
                reasons.append(
                    f"{c['label']} {basis} {_fmt(c['value'])} is marginal "
                    f"(pass level {_fmt(c['pass'])}; {accepted})"
                )
            else:
                reasons.append(
                    f"{c['label']} {basis} {_fmt(c['value'])} falls short of {_fmt(c['pass'])}"
                )
            if c.get("demonstrable"):
                reasons.append(c["demonstrable"])
        reasons.extend(n["text"] for n in conflicts if n["rater"] == rid)
        on = study.date if ok else None
        until = valid_until(on, cert.valid_months) if on is not None else None
        inspectors.append(
            {
                "rater": rid,
                "name": names.get(rid),
                "outcome": "certified" if ok else "not certified",
                "reasons": reasons,
                "checks": mine,
                "criteria_met": criteria_ok,
                "criteria_checks": [
                    {k: c[k] for k in ("rule", "measure", "outcome", "value", "pass", "judge")}
                    for c in from_criteria
                ],
                "certified_on": on.isoformat() if on else None,
                "valid_until": until.isoformat() if until else None,
                "due_from": (until - dt.timedelta(days=cert.due_window_days)).isoformat()
                if until
                else None,
            }
        )
    cautions = [GENERAL_CAUTION] + ([SAFETY_CAUTION] if study.safety_related else [])
    return {
        "source": cert.source,
        "marginal_is": cert.marginal_is,
        "valid_months": cert.valid_months,
        "due_window_days": cert.due_window_days,
        "study_date": study.date.isoformat() if study.date else None,
        "rules": [r.as_record(study.confidence) for r in cert.rules],
        "inspectors": inspectors,
        "cautions": cautions,
        "criteria_apply": True,
        "independence": conflicts,
    }


def _criteria_record(study: Study, results: Mapping[str, Any], c: Criteria) -> dict[str, Any]:
    cautions = []
    if c.set is not None:
        cautions.append(c.set.caution)
    else:
        cautions.append(GENERAL_CAUTION)
    if study.safety_related:
        cautions.append(SAFETY_CAUTION)
    rec: dict[str, Any] = {
        "set": c.set.name if c.set else None,
        "title": c.set.title if c.set else None,
        "source": c.source,
        "cautions": cautions,
        "marginal_is": c.marginal_is,
        "params": dict(sorted(c.params.items())),
        "rules": [r.as_record(study.confidence) for r in c.rules],
        "left_out": [{"measure": m, "reason": why} for m, why in c.left_out],
        "zero_failure": None,
    }
    zf = [
        r
        for r in c.rules
        if r.confidence is not None and r.better == "lower" and r.judge == "upper_bound"
    ]
    if zf:
        from .stats.proportion import zero_failure_sample_size

        r = zf[0]
        reliability = 1.0 - r.pass_level
        n0 = zero_failure_sample_size(reliability, r.confidence) if 0 < reliability < 1 else None
        ratings_now = sorted(
            {
                rec_.get("items")
                for t in _targets(study, results, r)
                if (rec_ := _lookup(results, r.info, t)) is not None
                and isinstance(rec_.get("items"), int)
            }
        )
        rec["zero_failure"] = {
            "measure": r.measure,
            "limit": r.pass_level,
            "reliability": reliability,
            "confidence": r.confidence,
            "formula": "n = ln(1 - C) / ln(R)",
            "ratings_needed": n0,
            "ratings_now": ratings_now,
            "text": (
                f"With no misses at all, {n0} ratings of defect items per rater show a miss "
                f"rate of at most {_fmt(r.pass_level)} with {_pct(r.confidence)} confidence "
                f"(n = ln(1 - {r.confidence:g}) / ln({reliability:g})); every miss raises "
                f"the number needed. This study has "
                f"{', '.join(str(x) for x in ratings_now) or 'no'} per rater."
            ),
        }
    return rec


def judge(study: Study, results: Mapping[str, Any]) -> dict[str, Any]:
    """Judge the results against the study's criteria and certification rules.

    Returns the keys ``"criteria"``, ``"verdict"``, ``"certification"`` and ``"actions"`` to
    merge into the results dict.  Raises :class:`InputError` when the criteria are invalid.
    """
    criteria, cert = load_criteria(study, results)
    out: dict[str, Any] = {}
    if criteria is None:
        out["criteria"] = None
        out["verdict"] = {
            "outcome": None,
            "sentence": "No acceptance criteria were set for this study, so no verdict is given.",
            "marginal_is": None,
            "counts": {"meets": 0, "marginal": 0, "short": 0},
            "rules": [],
        }
        checks: list[dict[str, Any]] = []
    else:
        checks = _judge_rules(study, results, criteria.rules)
        ok = all(_counts_ok(c["outcome"], criteria.marginal_is) for c in checks) and bool(checks)
        outcome = "PASS" if ok else "IMPROVE"
        out["criteria"] = _criteria_record(study, results, criteria)
        out["verdict"] = {
            "outcome": outcome,
            "sentence": _verdict_sentence(outcome, checks, criteria.marginal_is),
            "marginal_is": criteria.marginal_is,
            "counts": {
                k: sum(c["outcome"] == k for c in checks) for k in ("meets", "marginal", "short")
            },
            "rules": checks,
        }
    out["certification"] = (
        _certify(
            study,
            results,
            cert,
            [c for c in checks if c.get("rater")],
            criteria.marginal_is if criteria is not None else "improve",
        )
        if cert is not None
        else None
    )
    out["actions"] = actions(study, results, checks=checks)
    return out


# --------------------------------------------------------------------------------------------
# Actions
# --------------------------------------------------------------------------------------------

ACTION_KINDS = (
    "rater-direction",  # a rater calls items stricter / more leniently than the reference
    "rater-consistency",  # a rater calls the same item differently in different trials
    "confused-pair",  # two categories are mixed up most often
    "hard-items",  # items with the least agreement
    "few-borderline",  # the item set has too few items near a category boundary
    "more-items",  # the interval is too wide for the decision
)


def actions(
    study: Study, results: Mapping[str, Any], *, checks: Sequence[Mapping[str, Any]] = ()
) -> list[dict[str, Any]]:
    """Concrete next steps, ranked: first those behind a rule that is not met, then by kind and
    by the share of ratings or items they concern."""
    found: list[dict[str, Any]] = []
    failing_raters = {c["rater"] for c in checks if c["outcome"] != "meets" and c["rater"]}
    found += _rater_direction(study, results, failing_raters)
    found += _rater_consistency(study, results, failing_raters)
    found += _confused_pair(study, results)
    found += _hard_items(study, results)
    found += _few_borderline(study, results)
    found += _more_items(study, results, checks)
    order = {k: i for i, k in enumerate(ACTION_KINDS)}
    found.sort(
        key=lambda a: (not a["linked_to_verdict"], order[a["kind"]], -a["effect"], a["subject"])
    )
    for i, a in enumerate(found):
        a["rank"] = i + 1
    return found


def _action(
    kind: str, subject: str, text: str, effect: float, figures: dict[str, Any], linked: bool = False
) -> dict[str, Any]:
    return {
        "rank": 0,
        "kind": kind,
        "subject": subject,
        "text": text,
        "effect": effect,
        "linked_to_verdict": linked,
        "figures": figures,
    }


def _confusion_counts(study: Study, conf: Any) -> list[list[int]] | None:
    """The rater × reference count matrix (rows = rater's category, columns = reference), in the
    study's category order, from the results' ``confusion`` record."""
    if not isinstance(conf, Mapping) or conf.get("rows", "rater") != "rater":
        return None
    codes = list(study.category_codes)
    cats = list(conf.get("categories") or codes)
    m = conf.get("counts")
    if sorted(cats) != sorted(codes) or not isinstance(m, list) or len(m) != len(cats):
        return None
    pos = [cats.index(c) for c in codes]
    try:
        return [[int(m[pos[a]][pos[b]]) for b in range(len(codes))] for a in range(len(codes))]
    except (IndexError, TypeError, ValueError):
        return None


def _cat(study: Study, code: str) -> str:
    labels = {c.code: c.label for c in study.categories}
    return f"{code} ({labels[code]})" if code in labels and labels[code] != code else code


def _n(count: int, noun: str) -> str:
    return f"{count} {noun}" + ("" if count == 1 else "s")


def _rec(block: Any, name: str) -> float | None:
    if not isinstance(block, Mapping) or not _is_record(block.get(name)):
        return None
    return _num(block[name].get("estimate"))


def _rater_direction(
    study: Study, results: Mapping[str, Any], failing: set[str]
) -> list[dict[str, Any]]:
    acc = results.get("accuracy")
    if not isinstance(acc, Mapping):
        return []
    codes = list(study.category_codes)
    k = len(codes)
    ordinal = results.get("ordinal") if isinstance(results.get("ordinal"), Mapping) else {}
    out = []
    for rid in sorted(acc):
        block = acc[rid]
        if not isinstance(block, Mapping):
            continue
        eff = _rec(block, "effectiveness")
        wrong = None if eff is None else 1.0 - eff
        if wrong is None or wrong <= 0 or (wrong < RATER_ACTION_SHARE and rid not in failing):
            continue
        miss, fa = _rec(block, "miss_rate"), _rec(block, "false_alarm_rate")
        offset = _rec((ordinal.get("accuracy") or {}).get(rid), "mean_offset")
        counts = _confusion_counts(study, block.get("confusion"))
        figures: dict[str, Any] = {
            "disagreement": wrong,
            "miss_rate": miss,
            "false_alarm_rate": fa,
            "mean_offset": offset,
            "direction": None,
            "most_common": None,
        }
        detail = ""
        off_rec = ((ordinal.get("accuracy") or {}).get(rid) or {}).get("mean_offset")
        if study.scale == "ordinal" and offset is not None and _is_record(off_rec):
            lo, hi = _num(off_rec.get("ci_low")), _num(off_rec.get("ci_high"))
            # a direction only when the interval of the mean offset excludes 0
            if lo is not None and hi is not None and (lo > 0 or hi < 0):
                figures["direction"] = "strict" if lo > 0 else "lenient"
                detail = f"mean offset {offset:+.2f} steps from the reference"
        elif miss is not None and fa is not None:
            m_lo = _num(block["miss_rate"].get("ci_low"))
            f_lo = _num(block["false_alarm_rate"].get("ci_low"))
            # a direction only when one rate's interval lies wholly above the other rate
            if m_lo is not None and m_lo > fa:
                figures["direction"] = "lenient"
            elif f_lo is not None and f_lo > miss:
                figures["direction"] = "strict"
            detail = f"miss rate {_fmt(miss)}, false alarm rate {_fmt(fa)}"
        if counts is not None:
            cells = [
                (counts[a][b], a, b)
                for a in range(k)
                for b in range(k)
                if a != b and counts[a][b] > 0
            ]
            if cells:
                n, a, b = max(cells, key=lambda t: (t[0], -t[2], -t[1]))
                figures["most_common"] = {"rated": codes[a], "reference": codes[b], "ratings": n}
        share = f"{_pct(round(wrong, 3))} of ratings"
        if figures["direction"] == "strict":
            text = (
                f"{rid} rates items worse than the reference ({detail}; {share} differ): too "
                f"strict. Go through the limit samples with {rid}, starting with the items "
                f"{rid} rejected or downgraded."
            )
        elif figures["direction"] == "lenient":
            text = (
                f"{rid} rates items better than the reference ({detail}; {share} differ): too "
                f"lenient. Go through the limit samples with {rid}, starting with the items "
                f"{rid} passed or upgraded."
            )
        else:
            mc = figures["most_common"]
            most = (
                (
                    f"; most often {_cat(study, mc['rated'])} where the reference is "
                    f"{_cat(study, mc['reference'])} ({_n(mc['ratings'], 'rating')})"
                )
                if mc
                else ""
            )
            both = f" ({detail})" if detail else ""
            text = (
                f"{rid} differs from the reference in {share}{both}, with no clear direction"
                f"{most}. Review the category descriptions and the limit samples with {rid}."
            )
        out.append(_action("rater-direction", rid, text, wrong, figures, rid in failing))
    return out


def _rater_consistency(
    study: Study, results: Mapping[str, Any], failing: set[str]
) -> list[dict[str, Any]]:
    rep = results.get("repeatability")
    if not isinstance(rep, Mapping):
        return []
    out = []
    for rid in sorted(rep):
        block = rep[rid]
        est = _rec(block, "agreement")
        if est is None:
            continue
        mixed_share = 1.0 - est
        if mixed_share <= 0 or (mixed_share < RATER_ACTION_SHARE and rid not in failing):
            continue
        n, mixed = block.get("items"), block.get("mixed_calls")
        count = (
            f"{mixed} of {n} items"
            if isinstance(n, int) and isinstance(mixed, int)
            else f"{_pct(round(mixed_share, 3))} of items"
        )
        text = (
            f"{rid} called {count} differently in different trials. Check what {rid} looks at "
            f"on those items (lighting, viewing distance, handling) and whether the category "
            f"descriptions leave room for doubt."
        )
        out.append(
            _action(
                "rater-consistency",
                rid,
                text,
                mixed_share,
                {"mixed_calls": mixed, "items": n, "share": mixed_share},
                rid in failing,
            )
        )
    return out


def _confused_pair(study: Study, results: Mapping[str, Any]) -> list[dict[str, Any]]:
    """The pair of categories the raters mix up most, against the reference (all raters pooled);
    without a reference, among the ratings of the same item."""
    codes = list(study.category_codes)
    k = len(codes)
    if k < 2:
        return []
    pair = [[0] * k for _ in range(k)]
    total = 0
    basis = "ratings against the reference"
    acc = results.get("accuracy")
    if isinstance(acc, Mapping) and acc:
        for block in acc.values():
            counts = _confusion_counts(
                study, block.get("confusion") if isinstance(block, Mapping) else None
            )
            if counts is None:
                continue
            for a in range(k):
                for b in range(k):
                    total += counts[a][b]
                    if a != b:
                        pair[min(a, b)][max(a, b)] += counts[a][b]
    elif (table := _item_count_table(results.get("items"), codes)) is not None:
        # the same sums as the loop below, from an items × categories array: pairs of ratings
        # of different categories a, b on one item = (C^T C)[a, b], all pairs = m (m - 1) / 2
        basis = "pairs of ratings of the same item"
        m = table.sum(axis=1)
        total = int((m * (m - 1) // 2).sum())
        cross = table.T @ table
        pair = [[int(cross[a, b]) if a < b else 0 for b in range(k)] for a in range(k)]
    else:
        basis = "pairs of ratings of the same item"
        for it in results.get("items") or []:
            c = it.get("counts") if isinstance(it, Mapping) else None
            if not isinstance(c, Mapping):
                continue
            v = [int(c.get(code, 0) or 0) for code in codes]
            m = sum(v)
            total += m * (m - 1) // 2
            for a in range(k):
                for b in range(a + 1, k):
                    pair[a][b] += v[a] * v[b]
    if total == 0:
        return []
    n, a, b = max(
        ((pair[a][b], a, b) for a in range(k) for b in range(a + 1, k)),
        key=lambda t: (t[0], -t[1], -t[2]),
    )
    if n == 0:
        return []
    ca, cb = codes[a], codes[b]
    text = (
        f"{_cat(study, ca)} and {_cat(study, cb)} are mixed up most often: {n} of "
        f"{total} {basis}. Clarify the boundary between them in the category descriptions "
        f"and add limit samples on both sides of it."
    )
    return [
        _action(
            "confused-pair",
            f"{ca}/{cb}",
            text,
            n / total,
            {"categories": [ca, cb], "count": n, "of": total, "basis": basis},
        )
    ]


def _item_count_table(items: Any, codes: Sequence[str]) -> Any:
    """The items' ``counts`` as an items × categories int64 array (a category absent from a
    record counts 0), or None unless every item is a plain dict whose ``counts`` is a plain dict
    of integers small enough for exact int64 sums (the caller then walks the records)."""
    import operator

    import numpy as np

    if not isinstance(items, list) or not items or set(map(type, items)) != {dict}:
        return None
    counts = [it.get("counts") for it in items]
    if set(map(type, counts)) != {dict}:
        return None
    get = operator.itemgetter(*codes)
    try:
        rows = list(map(get, counts))
    except KeyError:
        rows = [tuple(c.get(code, 0) for code in codes) for c in counts]
    try:
        table = np.array(rows)  # Python ints only give int64; None, floats or text do not
    except (TypeError, ValueError):  # a list or other sequence among the counts
        return None
    if table.dtype != np.int64 or table.shape != (len(items), len(codes)):
        return None
    bound = int(np.abs(table).max())
    if (bound * len(codes)) ** 2 * len(items) >= 2**62:  # m (m - 1) and C^T C stay exact
        return None
    return table


def _item_index(results: Mapping[str, Any]) -> dict[str, Mapping[str, Any]]:
    # type() first: isinstance against the Mapping ABC is slow over 100,000 records
    return {
        str(it["id"]): it
        for it in results.get("items") or []
        if (type(it) is dict or isinstance(it, Mapping)) and "id" in it
    }


def _hard_items(study: Study, results: Mapping[str, Any]) -> list[dict[str, Any]]:
    hard = results.get("hard_items")
    if not isinstance(hard, list) or not hard:
        return []
    index = _item_index(results)
    shown = [str(h) for h in hard[:HARD_ITEMS_SHOWN]]
    rows = []
    for iid in shown:
        it = index.get(iid, {})
        rows.append(
            {"item": iid, "agreement": _num(it.get("agreement")), "reference": it.get("reference")}
        )
    names = ", ".join(
        r["item"] + (f" (reference {r['reference']})" if r["reference"] is not None else "")
        for r in rows
    )
    more = f" and {len(hard) - len(shown)} more" if len(hard) > len(shown) else ""
    text = (
        f"Review the items with the least agreement together with the raters: {names}{more}. "
        f"Confirm their reference, and keep the clear-cut ones as limit samples."
    )
    worst = rows[0]["agreement"]
    return [
        _action(
            "hard-items",
            ", ".join(shown),
            text,
            1.0 - worst if worst is not None else 0.0,
            {"items": rows, "hard_items": len(hard)},
        )
    ]


def _few_borderline(study: Study, results: Mapping[str, Any]) -> list[dict[str, Any]]:
    index = _item_index(results)
    # one flag per item rated at least twice: whether it drew any disagreement
    drew = [
        it.get("all_agree") is False or it.get("matches_reference") is False
        for it in index.values()
        if isinstance(r := it.get("ratings"), int) and r >= 2
    ]
    n_judged = len(drew)
    if n_judged < 2:
        return []
    split = sum(drew)
    share = split / n_judged
    if share >= BORDERLINE_SHARE:
        return []
    text = (
        f"Only {split} of {n_judged} items ({_pct(round(share, 3))}) drew any disagreement: "
        f"the item set has few borderline items, so it says little about the hard calls. "
        f"Next time include more items close to the category boundaries (at least "
        f"{_pct(BORDERLINE_SHARE)} of the items is common practice, no source)."
    )
    return [
        _action(
            "few-borderline",
            "item set",
            text,
            BORDERLINE_SHARE - share,
            {"items_with_disagreement": split, "items": n_judged, "share": share},
        )
    ]


def _more_items(
    study: Study, results: Mapping[str, Any], checks: Sequence[Mapping[str, Any]]
) -> list[dict[str, Any]]:
    n_now = _design_items(results)
    settling = sorted(
        (
            (c["settle"]["items_needed"], c["measure"])
            for c in checks
            if c.get("settle") and c["settle"].get("items_needed")
        ),
    )
    if settling and n_now:
        # checks whose estimate sits very close to a level need an impractical study; they are
        # named, but the recommendation is sized on the others
        practical = [(need, m) for need, m in settling if need <= SETTLE_PRACTICAL_FACTOR * n_now]
        shown = practical or settling[:1]
        need = max(n for n, _ in shown)
        listed = ", ".join(f"{m} about {n}" for n, m in shown[:5])
        rest = len(settling) - len(shown)
        tail = (
            f" {rest} more {'check sits' if rest == 1 else 'checks sit'} so close to a level "
            f"that only a far larger study would settle {'it' if rest == 1 else 'them'}."
            if rest > 0
            else ""
        )
        text = (
            f"The interval straddles a level for {len(settling)} criterion "
            f"{'check' if len(settling) == 1 else 'checks'}. Items needed in all (now {n_now}, "
            f"same mix of items) to settle: {listed}.{tail}"
        )
        return [
            _action(
                "more-items",
                "items",
                text,
                1.0 - n_now / need if need > n_now else 0.0,
                {
                    "items_now": n_now,
                    "items_needed": need,
                    "checks": [{"measure": m, "items_needed": n} for n, m in settling],
                },
                True,
            )
        ]
    cav = results.get("caveats")
    prec = cav.get("precision") if isinstance(cav, Mapping) else None
    if not isinstance(prec, Mapping):
        return []
    need, hw, target = (
        prec.get("items_needed"),
        _num(prec.get("half_width")),
        _num(prec.get("target_half_width")),
    )
    if not isinstance(need, int) or n_now is None or need <= n_now or hw is None or target is None:
        return []
    text = (
        f"The interval of {prec.get('measure')} is ±{hw:.2f} wide, more than the target "
        f"±{target:g}: about {need} items in all (now {n_now}) would reach the target."
    )
    return [
        _action(
            "more-items",
            "items",
            text,
            1.0 - n_now / need,
            {
                "items_now": n_now,
                "items_needed": need,
                "half_width": hw,
                "target_half_width": target,
                "measure": prec.get("measure"),
            },
        )
    ]
