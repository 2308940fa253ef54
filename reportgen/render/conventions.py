"""The counting conventions as the report states them: plain words, only for what was computed.

``results["conventions"]`` (analysis.py) explains the results keys to people who read
results.json; the report explains the same rules without keys, and leaves out every rule whose
measure the study does not have (no miss rate without a defect category, no ordered-scale rules
on a nominal scale, no reference rules without a reference).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

Results = Mapping[str, Any]


def _blocks(results: Results, group: str) -> list[Mapping[str, Any]]:
    g = results.get(group)
    if not isinstance(g, Mapping):
        return []
    return [v for v in g.values() if isinstance(v, Mapping)]


def _per_rater_has(group: str, key: str) -> Callable[[Results], bool]:
    return lambda r: any(key in b for b in _blocks(r, group))


def _group_has(group: str, *keys: str) -> Callable[[Results], bool]:
    def test(r: Results) -> bool:
        g = r.get(group)
        return isinstance(g, Mapping) and any(k in g for k in keys)

    return test


def _has_group(group: str) -> Callable[[Results], bool]:
    return lambda r: bool(r.get(group))


def _ordinal(r: Results) -> bool:
    study = r.get("study")
    return isinstance(study, Mapping) and study.get("scale") == "ordinal"


def _and(*tests: Callable[[Results], bool]) -> Callable[[Results], bool]:
    return lambda r: all(t(r) for t in tests)


#: (topic, text, applies to these results?) in report order
RULES: tuple[tuple[str, str, Callable[[Results], bool]], ...] = (
    (
        "Missing ratings",
        "Each item has one rating slot per rater and trial. A missing rating is left out of every "
        "count; it is never treated as a category.",
        lambda r: True,
    ),
    (
        "Repeatability agreement",
        "Per rater: the items on which all of that rater's trials give the same category, out of "
        "the items the rater rated at least twice. Changed calls are the other items.",
        _has_group("repeatability"),
    ),
    (
        "Repeatability kappa",
        "Per rater: Fleiss' kappa with the rater's trials as the rating slots of each item.",
        _per_rater_has("repeatability", "fleiss_kappa"),
    ),
    (
        "Accuracy agreement",
        "Per rater: the items on which every rating of that rater, in every trial, matches the "
        "reference, out of the items with a reference that the rater rated at least once.",
        _per_rater_has("accuracy", "agreement"),
    ),
    (
        "Effectiveness",
        "Per rater: the ratings that match the reference, out of all the rater's ratings of items "
        "with a reference; every trial counts as one rating.",
        _per_rater_has("accuracy", "effectiveness"),
    ),
    (
        "Cohen's kappa against the reference",
        "Each rating is paired with the item's reference, all trials together. On an ordered scale "
        "the weighted kappa uses the weights built from the order of the declared categories.",
        _per_rater_has("accuracy", "cohen_kappa"),
    ),
    (
        "Miss rate",
        "The ratings of items whose reference is the defect category that name another category, "
        "out of all ratings of those items.",
        _per_rater_has("accuracy", "miss_rate"),
    ),
    (
        "False alarm rate",
        "The ratings of items whose reference is not the defect category that name the defect "
        "category, out of all ratings of those items.",
        _per_rater_has("accuracy", "false_alarm_rate"),
    ),
    (
        "Exact and within one step",
        "Ordered scales: the ratings equal to the reference, or at most one category away from it, "
        "out of the ratings of items with a reference.",
        _and(_ordinal, _has_group("accuracy")),
    ),
    (
        "Agreement among raters",
        "The items on which every rating of every rater, in every trial, is the same category, out "
        "of the items with at least two ratings.",
        _group_has("reproducibility", "agreement"),
    ),
    (
        "Coefficients over all ratings",
        "Fleiss' kappa, Krippendorff's alpha, Gwet's coefficients and the Brennan–Prediger "
        "coefficient treat all the ratings of an item, every rater and trial, as its rating slots, "
        "so a rater's own repeat ratings count too. The per-trial figures use one trial at a time.",
        _group_has("reproducibility", "fleiss_kappa", "krippendorff_alpha", "gwet_ac1"),
    ),
    (
        "Coefficients that keep raters apart",
        "Conger's kappa, Light's kappa and Cohen's kappa between pairs of raters compare raters "
        "only within the same trial; each item in each trial is rated once by each rater.",
        _group_has("reproducibility", "conger_kappa", "light_kappa", "pairwise_cohen_kappa"),
    ),
    (
        "Panel accuracy",
        "The items on which every rating of every rater matches the reference, out of the items "
        "with a reference and at least one rating; the panel's rates pool all raters' ratings.",
        _has_group("panel_accuracy"),
    ),
    (
        "Weights",
        "Ordered scales: linear and quadratic weights come from the positions of the declared "
        "categories (steps apart), not from their values.",
        _ordinal,
    ),
    (
        "Signed offset",
        "Ordered scales: the rating's position minus the reference's. Positive means the rater "
        "grades towards the worse end (stricter than the reference); negative, more leniently.",
        _and(_ordinal, _has_group("accuracy")),
    ),
    (
        "Item agreement",
        "Per item: the share of agreeing pairs among all pairs of its ratings (every rater and "
        "trial). The hard items are those with the least agreement, then the fewest ratings "
        "matching the reference.",
        lambda r: True,
    ),
    (
        "Items needed",
        "An approximation: the width of an interval is scaled by the square root of the items now "
        "over the items needed, assuming agreement and design stay as they are.",
        _group_has("caveats", "items_needed"),
    ),
)


def report_conventions(results: Results) -> list[dict[str, str]]:
    """The rules that apply to these results, as {topic, text}, in report order."""
    return [{"topic": t, "text": x} for t, x, applies in RULES if applies(results)]
