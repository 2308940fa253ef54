"""Acceptance criteria, verdict, certification and actions (reportgen.verdict).

Most tests judge synthetic results dicts built to the results schema ("reportgen-results/1"),
so every outcome is fixed by construction.  Levels of the shipped sets are rules of thumb of the
trade (common practice, no source) or values from memory, as each set says.
"""

from __future__ import annotations

import datetime as dt
import json
import math
from pathlib import Path
from typing import Any

import pytest

from reportgen.errors import InputError
from reportgen.model import Category, Rater, Study
from reportgen.verdict import (
    BINARY_INSPECTION,
    CRITERIA_SETS,
    KAPPA_BANDS,
    MISS_RATE_BOUND,
    applicable_measures,
    judge,
    valid_until,
    validate_criteria,
)

DELTA = 1e-9  # "just above / just below" a level; far above the 1e-12 rounding tolerance

BINARY = (Category("OK", "Conforming"), Category("NG", "Nonconforming"))
NOMINAL = (Category("A", "Scratch"), Category("B", "Dent"), Category("C", "Stain"))
ORDINAL = (
    Category("1", "Best"),
    Category("2", "Good"),
    Category("3", "Poor"),
    Category("4", "Scrap"),
)


def make_study(**over: Any) -> Study:
    base: dict[str, Any] = dict(
        path=Path("/tmp/study.yaml"),
        id="T-1",
        title="Test study",
        purpose=None,
        characteristic=None,
        station=None,
        revision=1,
        date=dt.date(2026, 11, 20),
        scale="binary",
        categories=BINARY,
        raters=(Rater("R1", "Ann"), Rater("R2", "Bo")),
        trials=2,
        ratings_path=Path("/tmp/ratings.csv"),
        defect_category="NG",
        reference_path=Path("/tmp/reference.csv"),
    )
    base.update(over)
    return Study(**base)


def M(
    est: float | None,
    lo: float | None = None,
    hi: float | None = None,
    *,
    items: int = 50,
    agreeing: int | None = None,
) -> dict[str, Any]:
    return {
        "estimate": est,
        "se": None,
        "ci_low": lo,
        "ci_high": hi,
        "ci_method": "test",
        "p_value": None,
        "items": items,
        "agreeing": agreeing,
    }


def make_results(
    study: Study,
    *,
    items: int = 50,
    rater: dict[str, dict[str, Any]] | None = None,
    panel: dict[str, Any] | None = None,
    reference: bool = True,
) -> dict[str, Any]:
    """A results dict to the schema, every figure a harmless 'good' value unless overridden."""
    rater = rater or {}
    res: dict[str, Any] = {
        "schema": "reportgen-results/1",
        "study": {"id": study.id, "revision": study.revision},
        "design": {
            "items": items,
            "raters": len(study.raters),
            "trials": study.trials,
            "categories": [c.code for c in study.categories],
            "scale": study.scale,
            "ratings": items * len(study.raters) * study.trials,
            "missing": 0,
        },
        "repeatability": {},
        "reproducibility": {},
        "caveats": {},
        "items": [],
        "hard_items": [],
        "warnings": [],
    }
    k = len(study.categories)
    for r in study.rater_ids:
        res["repeatability"][r] = {
            "agreement": M(0.96, 0.9, 0.99, agreeing=48),
            "fleiss_kappa": M(0.9, 0.8, 0.97),
            "mixed_calls": 2,
            "items": 50,
        }
    if reference:
        res["accuracy"] = {}
        for r in study.rater_ids:
            block = {
                "agreement": M(0.96, 0.9, 0.99),
                "effectiveness": M(0.98, 0.95, 0.99, items=100),
                "cohen_kappa": M(0.9, 0.8, 0.97),
                "confusion": {
                    "rows": "rater",
                    "columns": "reference",
                    "categories": list(study.category_codes),
                    "counts": [[25 if a == b else 0 for b in range(k)] for a in range(k)],
                },
            }
            if study.defect_category:
                block["miss_rate"] = M(0.0, 0.0, 0.015, items=200)
                block["false_alarm_rate"] = M(0.0, 0.0, 0.015, items=200)
            if study.scale == "ordinal":
                block["weighted_kappa"] = M(0.92, 0.85, 0.98)
                block["kendall_tau_b"] = M(0.9, 0.8, 0.95)
            res["accuracy"][r] = block
        res["panel_accuracy"] = {
            "agreement": M(0.9, 0.8, 0.96),
            "effectiveness": M(0.98, 0.95, 0.99),
        }
        if study.defect_category:
            res["panel_accuracy"].update(
                miss_rate=M(0.0, 0.0, 0.04), false_alarm_rate=M(0.0, 0.0, 0.04)
            )
    res["reproducibility"] = {
        "agreement": M(0.9, 0.8, 0.96),
        "fleiss_kappa": M(0.85, 0.78, 0.92),
        "gwet_ac1": M(0.9, 0.85, 0.95),
        "fleiss_kappa_by_category": {c: M(0.8, 0.7, 0.9) for c in study.category_codes},
    }
    for r, over in rater.items():
        for group, figures in over.items():
            res[group][r].update(figures)
    if panel:
        for group, figures in panel.items():
            res[group].update(figures)
    return res


def rules(*rs: dict[str, Any], marginal_is: str = "improve") -> dict[str, Any]:
    return {"source": "Test procedure TP-1", "marginal_is": marginal_is, "rules": list(rs)}


def errors(problems: list[Any]) -> list[Any]:
    return [p for p in problems if p.severity == "error"]


# ---------------------------------------------------------------------------------------------
# Outcomes at, just above and just below each level
# ---------------------------------------------------------------------------------------------

# (better, pass, marginal, value offset from level name, expected outcome)
HIGHER = [  # better: higher, pass 0.75, marginal 0.40
    (0.75 + DELTA, "meets"),
    (0.75, "meets"),
    (0.75 - DELTA, "marginal"),
    (0.40 + DELTA, "marginal"),
    (0.40, "marginal"),
    (0.40 - DELTA, "short"),
]
LOWER = [  # better: lower, pass 0.02, marginal 0.05
    (0.02 - DELTA, "meets"),
    (0.02, "meets"),
    (0.02 + DELTA, "marginal"),
    (0.05 - DELTA, "marginal"),
    (0.05, "marginal"),
    (0.05 + DELTA, "short"),
]


def _record_for(judge_on: str, value: float) -> dict[str, Any]:
    """A record whose judged number (estimate / lower end / upper end) is exactly ``value``."""
    if judge_on == "estimate":
        return M(value, max(0.0, value - 0.1), min(1.0, value + 0.1))
    if judge_on == "lower_bound":
        return M(min(1.0, value + 0.05), value, min(1.0, value + 0.1))
    return M(max(0.0, value - 0.01), max(0.0, value - 0.02), value)


@pytest.mark.parametrize("judge_on", ["estimate", "lower_bound", "upper_bound"])
@pytest.mark.parametrize("value,expected", HIGHER)
def test_levels_better_higher(judge_on: str, value: float, expected: str) -> None:
    study = make_study(
        criteria=rules(
            {
                "measure": "reproducibility.fleiss_kappa",
                "pass": 0.75,
                "marginal": 0.40,
                "judge": judge_on,
            }
        )
    )
    res = make_results(
        study, panel={"reproducibility": {"fleiss_kappa": _record_for(judge_on, value)}}
    )
    out = judge(study, res)
    (check,) = out["verdict"]["rules"]
    assert check["outcome"] == expected
    assert check["value"] == value
    assert check["level"] == 0.75
    assert check["margin"] == pytest.approx(value - 0.75, abs=1e-15)
    assert out["verdict"]["outcome"] == ("PASS" if expected == "meets" else "IMPROVE")


@pytest.mark.parametrize("judge_on", ["estimate", "lower_bound", "upper_bound"])
@pytest.mark.parametrize("value,expected", LOWER)
def test_levels_better_lower(judge_on: str, value: float, expected: str) -> None:
    study = make_study(
        criteria=rules(
            {
                "measure": "accuracy.*.miss_rate",
                "pass": 0.02,
                "marginal": 0.05,
                "better": "lower",
                "judge": judge_on,
            }
        )
    )
    res = make_results(
        study, rater={"R1": {"accuracy": {"miss_rate": _record_for(judge_on, value)}}}
    )
    out = judge(study, res)
    checks = {c["rater"]: c for c in out["verdict"]["rules"]}
    assert checks["R1"]["outcome"] == expected
    assert checks["R1"]["value"] == value
    assert checks["R1"]["margin"] == pytest.approx(
        0.02 - value, abs=1e-15
    )  # positive = better side
    assert checks["R2"]["outcome"] == "meets"  # 0.0, interval 0 to 0.015, from the defaults
    assert out["verdict"]["outcome"] == ("PASS" if expected == "meets" else "IMPROVE")


def test_judge_picks_the_right_end_of_the_interval() -> None:
    study = make_study(
        criteria=rules(
            {"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "judge": "estimate"},
            {"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "judge": "lower_bound"},
        )
    )
    res = make_results(study, panel={"reproducibility": {"fleiss_kappa": M(0.80, 0.70, 0.88)}})
    out = judge(study, res)
    est, low = out["verdict"]["rules"]
    assert (est["value"], est["outcome"]) == (0.80, "meets")
    assert (low["value"], low["outcome"]) == (0.70, "short")  # no marginal band: short
    assert out["verdict"]["outcome"] == "IMPROVE"


def test_rounding_noise_at_a_level_counts_as_at_the_level() -> None:
    study = make_study(criteria=rules({"measure": "reproducibility.fleiss_kappa", "pass": 0.75}))
    res = make_results(
        study, panel={"reproducibility": {"fleiss_kappa": M(0.75 - 1e-15, 0.6, 0.9)}}
    )
    assert judge(study, res)["verdict"]["rules"][0]["outcome"] == "meets"


def test_marginal_is_pass_and_improve() -> None:
    rule = {"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "marginal": 0.40}
    for marginal_is, verdict in (("pass", "PASS"), ("improve", "IMPROVE")):
        study = make_study(criteria=rules(rule, marginal_is=marginal_is))
        res = make_results(study, panel={"reproducibility": {"fleiss_kappa": M(0.6, 0.5, 0.7)}})
        out = judge(study, res)
        assert out["verdict"]["outcome"] == verdict
        assert out["verdict"]["counts"] == {"meets": 0, "marginal": 1, "short": 0}
        assert out["verdict"]["sentence"].startswith(verdict + ":")


def test_verdict_sentence_names_the_weakest_check() -> None:
    study = make_study(
        criteria=rules(
            {"measure": "accuracy.*.miss_rate", "pass": 0.02, "marginal": 0.05, "better": "lower"},
            {"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "marginal": 0.40},
        )
    )
    res = make_results(
        study,
        rater={"R2": {"accuracy": {"miss_rate": M(0.30, 0.2, 0.4)}}},
        panel={"reproducibility": {"fleiss_kappa": M(0.6, 0.5, 0.7)}},
    )
    out = judge(study, res)
    s = out["verdict"]["sentence"]
    assert s == (
        "IMPROVE: 1 of 3 criterion checks falls short and 1 is marginal; the furthest "
        "from its pass level is the miss rate of R2, estimate 0.3 against 0.02."
    )
    assert s.count(".") == s.count(". ") + 1 or s.endswith(".")  # one sentence


def test_undefined_measure_is_short_with_a_note() -> None:
    study = make_study(criteria=rules({"measure": "accuracy.*.cohen_kappa", "pass": 0.75}))
    res = make_results(study, rater={"R1": {"accuracy": {"cohen_kappa": M(None)}}})
    out = judge(study, res)
    r1 = next(c for c in out["verdict"]["rules"] if c["rater"] == "R1")
    assert r1["outcome"] == "short" and r1["value"] is None and "undefined" in r1["note"]
    assert out["verdict"]["outcome"] == "IMPROVE"
    assert "could not be judged" in out["verdict"]["sentence"]


def test_by_category_rules() -> None:
    study = make_study(
        scale="nominal",
        categories=NOMINAL,
        defect_category=None,
        criteria=rules(
            {"measure": "reproducibility.fleiss_kappa_by_category.B", "pass": 0.75},
            {"measure": "reproducibility.fleiss_kappa_by_category.*", "pass": 0.5},
        ),
    )
    res = make_results(study)
    res["reproducibility"]["fleiss_kappa_by_category"]["B"] = M(0.7, 0.6, 0.8)
    out = judge(study, res)
    got = [(c["rule"], c["category"], c["outcome"]) for c in out["verdict"]["rules"]]
    assert got == [(1, "B", "short"), (2, "A", "meets"), (2, "B", "meets"), (2, "C", "meets")]


# ---------------------------------------------------------------------------------------------
# "More items would settle it"
# ---------------------------------------------------------------------------------------------


def test_straddled_level_gives_items_needed_by_square_root_scaling() -> None:
    # estimate 0.70, interval 0.60-0.80, pass 0.75 inside it: the upper half-width 0.10 must
    # shrink to 0.05, i.e. 4 x the items: 50 -> 200
    study = make_study(criteria=rules({"measure": "reproducibility.fleiss_kappa", "pass": 0.75}))
    res = make_results(
        study, items=50, panel={"reproducibility": {"fleiss_kappa": M(0.70, 0.60, 0.80)}}
    )
    check = judge(study, res)["verdict"]["rules"][0]
    assert check["outcome"] == "short"
    settle = check["settle"]
    assert settle["items_needed"] == math.ceil(50 * (0.10 / 0.05) ** 2 - 1e-9) == 200
    assert settle["items_now"] == 50
    assert "more items would settle it" in settle["text"]


def test_no_items_needed_beside_a_check_that_meets() -> None:
    # issue 12: estimate 0.80 meets 0.75 although the interval 0.70-0.88 straddles it
    study = make_study(criteria=rules({"measure": "reproducibility.fleiss_kappa", "pass": 0.75}))
    res = make_results(
        study, items=50, panel={"reproducibility": {"fleiss_kappa": M(0.80, 0.70, 0.88)}}
    )
    check = judge(study, res)["verdict"]["rules"][0]
    assert check["outcome"] == "meets" and check["settle"] is None


def test_more_than_ten_times_the_items_is_not_settled_by_a_larger_study() -> None:
    # estimate 0.74, interval 0.60-0.88: half-width 0.14 to gap 0.01 -> 50 * 196 = 9800 items
    study = make_study(criteria=rules({"measure": "reproducibility.fleiss_kappa", "pass": 0.75}))
    res = make_results(
        study, items=50, panel={"reproducibility": {"fleiss_kappa": M(0.74, 0.60, 0.88)}}
    )
    settle = judge(study, res)["verdict"]["rules"][0]["settle"]
    assert settle["items_needed"] > 10 * 50
    assert settle["text"].startswith("not settled by a larger study of this design")


def test_lower_bound_below_pass_with_estimate_above_is_settled_by_more_items() -> None:
    study = make_study(
        criteria=rules(
            {
                "measure": "reproducibility.fleiss_kappa",
                "pass": 0.75,
                "marginal": 0.40,
                "judge": "lower_bound",
            }
        )
    )
    res = make_results(
        study, items=64, panel={"reproducibility": {"fleiss_kappa": M(0.81, 0.73, 0.88)}}
    )
    out = judge(study, res)
    check = out["verdict"]["rules"][0]
    assert check["outcome"] == "marginal"
    # half-width on the judged side 0.08, gap 0.06: 64 * (0.08/0.06)^2 = 113.8 -> 114
    assert check["settle"]["items_needed"] == 114
    more = [a for a in out["actions"] if a["kind"] == "more-items"]
    assert more and more[0]["figures"]["items_needed"] == 114 and more[0]["linked_to_verdict"]


def test_no_settle_when_the_estimate_is_on_the_wrong_side_of_a_bound_rule() -> None:
    study = make_study(
        criteria=rules(
            {"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "judge": "lower_bound"}
        )
    )
    res = make_results(study, panel={"reproducibility": {"fleiss_kappa": M(0.70, 0.60, 0.80)}})
    assert judge(study, res)["verdict"]["rules"][0]["settle"] is None


# ---------------------------------------------------------------------------------------------
# Validation: unknown and non-applicable measures, levels, judging basis, positions
# ---------------------------------------------------------------------------------------------


def test_unknown_measure_is_refused_with_the_applicable_list() -> None:
    study = make_study(criteria=rules({"measure": "reproducibility.fleis_kappa", "pass": 0.7}))
    (p,) = errors(validate_criteria(study, make_results(study)))
    assert p.message == "unknown measure 'reproducibility.fleis_kappa'"
    assert p.location.key == "criteria.rules[0].measure"
    assert "did you mean 'reproducibility.fleiss_kappa'?" in p.hint
    assert "measures that apply to this study: " in p.hint
    assert "accuracy.*.miss_rate" in p.hint and "reproducibility.gwet_ac1" in p.hint


def test_miss_rate_in_a_nominal_study_without_defect_category_is_refused() -> None:
    study = make_study(
        scale="nominal",
        categories=NOMINAL,
        defect_category=None,
        criteria=rules({"measure": "accuracy.*.miss_rate", "pass": 0.02, "better": "lower"}),
    )
    res = make_results(study)
    (p,) = errors(validate_criteria(study, res))
    assert p.message == (
        "measure 'accuracy.*.miss_rate' does not apply to this study: "
        "needs a defect category (`defect_category`)"
    )
    listed = p.hint.removeprefix("measures that apply to this study: ").split(", ")
    assert listed == applicable_measures(study, res)
    assert "accuracy.*.miss_rate" not in listed and "accuracy.*.effectiveness" in listed
    with pytest.raises(InputError) as exc:
        judge(study, res)
    assert "does not apply" in str(exc.value)


def test_applicability_without_results_follows_the_design() -> None:
    study = make_study(
        scale="nominal", categories=NOMINAL, defect_category=None, trials=1, reference_path=None
    )
    m = applicable_measures(study, has_reference=False)
    assert "reproducibility.fleiss_kappa" in m
    assert not any(x.startswith(("accuracy.", "panel_accuracy.", "repeatability.")) for x in m)
    assert "reproducibility.kendall_w" not in m  # ordinal only
    study = make_study(
        criteria=rules({"measure": "repeatability.*.agreement", "pass": 0.9}), trials=1
    )
    (p,) = errors(validate_criteria(study, None, has_reference=True))
    assert "needs at least 2 trials per rater" in p.message


@pytest.mark.parametrize(
    "rule,key,fragment",
    [
        (
            {"measure": "reproducibility.fleiss_kappa", "pass": 0.40, "marginal": 0.75},
            "criteria.rules[0].marginal",
            "must be below the pass level",
        ),
        (
            {"measure": "accuracy.*.miss_rate", "pass": 0.05, "marginal": 0.02, "better": "lower"},
            "criteria.rules[0].marginal",
            "must be above the pass level",
        ),
        (
            {"measure": "accuracy.*.miss_rate", "pass": 0.02, "better": "higher"},
            "criteria.rules[0].better",
            "lower is better",
        ),
        (
            {"measure": "accuracy.*.effectiveness", "pass": 1.2},
            "criteria.rules[0].pass",
            "outside the range",
        ),
        (
            {"measure": "accuracy.*.effectiveness", "pass": "high"},
            "criteria.rules[0].pass",
            "must be a number",
        ),
        (
            {"measure": "accuracy.*.effectiveness", "pass": 0.9, "judge": "lowerbound"},
            "criteria.rules[0].judge",
            "must be one of estimate, lower_bound, upper_bound",
        ),
        (
            {"measure": "accuracy.*.effectiveness", "pass": 0.9, "passs": 1},
            "criteria.rules[0].passs",
            "unknown key 'passs'",
        ),
        (
            {"measure": "accuracy.R9.effectiveness", "pass": 0.9},
            "criteria.rules[0].measure",
            "unknown rater 'R9'",
        ),
        (
            {"measure": "accuracy.effectiveness", "pass": 0.9},
            "criteria.rules[0].measure",
            "needs a rater",
        ),
        (
            {
                "measure": "reproducibility.fleiss_kappa",
                "pass": 0.7,
                "judge": "lower_bound",
                "confidence": 0.95,
            },
            "criteria.rules[0].confidence",
            "rates and agreement shares only",
        ),
        (
            {
                "measure": "accuracy.*.miss_rate",
                "pass": 0.05,
                "better": "lower",
                "confidence": 0.95,
            },
            "criteria.rules[0].confidence",
            "needs 'judge: lower_bound' or 'judge: upper_bound'",
        ),
        ({"pass": 0.9}, "criteria.rules[0]", "missing key 'measure'"),
    ],
)
def test_rule_problems(rule: dict[str, Any], key: str, fragment: str) -> None:
    study = make_study(criteria=rules(rule))
    probs = errors(validate_criteria(study, make_results(study)))
    assert any(p.location.key == key and fragment in p.message for p in probs), [
        p.format() for p in probs
    ]


def test_bound_judging_needs_an_interval() -> None:
    study = make_study(
        criteria=rules({"measure": "reproducibility.gwet_ac1", "pass": 0.7, "judge": "lower_bound"})
    )
    res = make_results(study, panel={"reproducibility": {"gwet_ac1": M(0.9)}})  # no interval
    (p,) = errors(validate_criteria(study, res))
    assert p.location.key == "criteria.rules[0].judge"
    assert "needs an interval" in p.message


def test_optimistic_bound_is_a_warning_not_an_error() -> None:
    study = make_study(
        criteria=rules(
            {"measure": "reproducibility.fleiss_kappa", "pass": 0.7, "judge": "upper_bound"}
        )
    )
    probs = validate_criteria(study, make_results(study))
    assert [p.severity for p in probs] == ["warning"]
    assert "benefit of the doubt" in probs[0].message
    judge(study, make_results(study))  # does not raise


def test_criteria_need_a_source() -> None:
    study = make_study(
        criteria={"rules": [{"measure": "reproducibility.fleiss_kappa", "pass": 0.7}]}
    )
    (p,) = errors(validate_criteria(study, make_results(study)))
    assert "where these acceptance levels come from" in p.message


def test_problem_positions_come_from_the_study_file(tmp_path: Path) -> None:
    from reportgen.study import load_study

    (tmp_path / "ratings.csv").write_text("item,rater,trial,rating\n", encoding="utf-8")
    (tmp_path / "study.yaml").write_text(
        "study:\n"
        "  id: POS-1\n"
        "  title: Positions\n"
        "scale: nominal\n"
        "categories:\n"
        "  - {code: A, label: Scratch}\n"
        "  - {code: B, label: Dent}\n"
        "raters:\n"
        "  - {id: R1, name: Ann}\n"
        "  - {id: R2, name: Bo}\n"
        "trials: 1\n"
        "ratings: ratings.csv\n"
        "criteria:\n"
        "  source: Test procedure\n"
        "  rules:\n"
        "    - measure: accuracy.*.miss_rate\n"
        "      pass: 0.02\n",
        encoding="utf-8",
    )
    study = load_study(tmp_path / "study.yaml")
    (p,) = errors(validate_criteria(study, None, has_reference=False))
    assert (p.location.line, p.location.column) == (16, 16)
    assert p.location.key == "criteria.rules[0].measure"
    assert p.format().startswith(
        f"{p.location.path}:16:16: error: criteria.rules[0].measure: measure "
    )
    assert p.location.path.endswith("study.yaml")


# ---------------------------------------------------------------------------------------------
# Shipped criteria sets
# ---------------------------------------------------------------------------------------------


def test_every_shipped_set_has_a_source_and_a_caution() -> None:
    assert sorted(CRITERIA_SETS) == ["binary-inspection", "kappa-bands", "miss-rate-bound"]
    for cs in CRITERIA_SETS.values():
        assert cs.source.strip() and cs.caution.strip() and cs.title.strip()
    assert "common practice, no source" in KAPPA_BANDS.source
    assert (
        "from memory, verify against your copy of the reference manual"
        in BINARY_INSPECTION.source.lower()
    )
    assert "n = ln(1 - C) / ln(R)" in MISS_RATE_BOUND.source


def test_vocabulary_lists_the_shipped_sets() -> None:
    from _vocabulary import all_text

    text = all_text()
    for name in CRITERIA_SETS:
        assert f"`{name}`" in text


def test_kappa_bands_prints_source_and_leaves_out_what_does_not_apply() -> None:
    study = make_study(
        scale="nominal",
        categories=NOMINAL,
        defect_category=None,
        reference_path=None,
        criteria={"set": "kappa-bands"},
    )
    res = make_results(study, reference=False)
    out = judge(study, res)
    crit = out["criteria"]
    assert crit["set"] == "kappa-bands" and crit["source"] == KAPPA_BANDS.source
    assert crit["cautions"][0] == KAPPA_BANDS.caution
    assert [r["measure"] for r in crit["rules"]] == [
        "repeatability.*.fleiss_kappa",
        "reproducibility.fleiss_kappa",
    ]
    assert [r["rule"] for r in crit["rules"]] == [1, 2]
    assert crit["left_out"] == [
        {
            "measure": "accuracy.*.cohen_kappa",
            "reason": "measure 'accuracy.*.cohen_kappa' does not apply to this "
            "study: needs a reference category for the items",
        }
    ]
    assert out["verdict"]["outcome"] == "PASS"  # 0.9 and 0.85 against 0.75


def test_binary_set_refused_where_it_does_not_apply() -> None:
    study = make_study(
        scale="nominal",
        categories=NOMINAL,
        defect_category=None,
        criteria={"set": "binary-inspection"},
    )
    (p,) = errors(validate_criteria(study, make_results(study)))
    assert p.location.key == "criteria.set"
    assert "does not apply to this study: needs a defect category" in p.message
    assert "measures that apply: " in p.hint


def test_binary_set_levels() -> None:
    study = make_study(criteria={"set": "binary-inspection"})
    res = make_results(
        study,
        rater={
            "R1": {
                "accuracy": {
                    "effectiveness": M(0.85, 0.8, 0.9),
                    "miss_rate": M(0.02, 0.0, 0.1),
                    "false_alarm_rate": M(0.11, 0.05, 0.2),
                }
            }
        },
    )
    out = judge(study, res)
    got = {(c["measure"], c["outcome"]) for c in out["verdict"]["rules"] if c["rater"] == "R1"}
    assert got == {
        ("accuracy.R1.effectiveness", "marginal"),
        ("accuracy.R1.miss_rate", "meets"),
        ("accuracy.R1.false_alarm_rate", "short"),
    }
    assert [(r["pass"], r["marginal"], r["better"]) for r in out["criteria"]["rules"]] == [
        (0.90, 0.80, "higher"),
        (0.02, 0.05, "lower"),
        (0.05, 0.10, "lower"),
    ]


def test_unknown_set_name() -> None:
    study = make_study(criteria={"set": "kappa-band"})
    (p,) = errors(validate_criteria(study, make_results(study)))
    assert (
        "unknown criteria set 'kappa-band'" in p.message and "did you mean 'kappa-bands'?" in p.hint
    )


@pytest.mark.parametrize(
    "misses,ratings,expected",
    [
        (0, 59, "meets"),  # 1 - 0.05**(1/59) = 0.04951 <= 0.05
        (0, 58, "short"),  # 1 - 0.05**(1/58) = 0.05033 >  0.05
        (1, 93, "meets"),  # exact bound 0.04994 (one miss needs n = 93)
        (1, 92, "short"),
    ],
)
def test_risk_set_one_sided_exact_bound(misses: int, ratings: int, expected: str) -> None:
    # The zero-failure sample size for R = C = 0.95 is 59 (success-run relation n = ln(1-C)/ln(R));
    # the one-sided Clopper-Pearson (1934) upper bound with 0 failures is 1 - (1-C)^(1/n) in closed form.
    study = make_study(criteria={"set": "miss-rate-bound"})
    res = make_results(study)
    for r in study.rater_ids:
        res["accuracy"][r]["miss_rate"] = M(
            misses / ratings, 0.0, 0.2, items=ratings, agreeing=misses
        )
    out = judge(study, res)
    checks = out["verdict"]["rules"]
    assert {c["outcome"] for c in checks} == {expected}
    if misses == 0:
        assert checks[0]["value"] == pytest.approx(1 - 0.05 ** (1 / ratings), rel=1e-9)
    zf = out["criteria"]["zero_failure"]
    assert zf["ratings_needed"] == 59 == math.ceil(math.log(0.05) / math.log(0.95))
    assert zf["ratings_now"] == [ratings]
    assert zf["formula"] == "n = ln(1 - C) / ln(R)"
    assert out["criteria"]["params"] == {"confidence": 0.95, "limit": 0.05}


def test_risk_set_parameters() -> None:
    study = make_study(criteria={"set": "miss-rate-bound", "limit": 0.01, "confidence": 0.95})
    out = judge(study, make_results(study))
    assert out["criteria"]["zero_failure"]["ratings_needed"] == 299  # ln(0.05)/ln(0.99) = 298.1
    assert out["criteria"]["rules"][0]["judge_basis"] == "the one-sided 95 % exact upper bound"
    bad = make_study(criteria={"set": "miss-rate-bound", "limit": 1.5, "confidence": 0.3})
    keys = sorted(p.location.key for p in errors(validate_criteria(bad, make_results(bad))))
    assert keys == ["criteria.confidence", "criteria.limit"]


def test_safety_related_study_carries_the_caution() -> None:
    study = make_study(
        safety_related=True,
        criteria={"set": "kappa-bands"},
        certification={
            "source": "T",
            "rules": [{"measure": "accuracy.effectiveness", "pass": 0.9}],
        },
    )
    out = judge(study, make_results(study))
    assert any(
        "safety-related" in c and "qualified people" in c for c in out["criteria"]["cautions"]
    )
    assert any("safety-related" in c for c in out["certification"]["cautions"])


# ---------------------------------------------------------------------------------------------
# Certification
# ---------------------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "start,months,end",
    [
        (dt.date(2026, 11, 20), 12, dt.date(2027, 11, 30)),
        (dt.date(2023, 2, 10), 12, dt.date(2024, 2, 29)),  # into a leap February
        (dt.date(2024, 2, 29), 12, dt.date(2025, 2, 28)),  # from a leap day
        (dt.date(2027, 1, 15), 13, dt.date(2028, 2, 29)),
        (dt.date(2025, 12, 31), 1, dt.date(2026, 1, 31)),  # across a year end
        (dt.date(2026, 1, 31), 1, dt.date(2026, 2, 28)),
        (dt.date(2099, 12, 1), 12, dt.date(2100, 12, 31)),
        (dt.date(2099, 2, 1), 12, dt.date(2100, 2, 28)),  # 2100 is not a leap year
    ],
)
def test_valid_until_is_the_end_of_the_month(start: dt.date, months: int, end: dt.date) -> None:
    assert valid_until(start, months) == end


def test_certification_per_inspector() -> None:
    study = make_study(
        date=dt.date(2024, 2, 29),
        criteria=rules({"measure": "reproducibility.fleiss_kappa", "pass": 0.75}),
        certification={
            "source": "Qualification rule invented for the tests",
            "valid_months": 12,
            "due_window_days": 30,
            "rules": [
                {"measure": "repeatability.agreement", "pass": 0.90},
                {
                    "measure": "accuracy.*.miss_rate",
                    "pass": 0.02,
                    "marginal": 0.05,
                    "better": "lower",
                },
            ],
        },
    )
    res = make_results(study, rater={"R2": {"accuracy": {"miss_rate": M(0.04, 0.01, 0.1)}}})
    cert = judge(study, res)["certification"]
    a, b = cert["inspectors"]
    assert (a["rater"], a["name"], a["outcome"]) == ("R1", "Ann", "certified")
    assert (a["certified_on"], a["valid_until"], a["due_from"]) == (
        "2024-02-29",
        "2025-02-28",
        "2025-01-29",
    )
    assert a["reasons"] == [
        "repeatability agreement rate estimate 0.96 is at or above 0.9",
        "miss rate estimate 0 is at or below 0.02",
    ]
    assert (b["outcome"], b["certified_on"], b["valid_until"]) == ("not certified", None, None)
    assert "miss rate estimate 0.04 is marginal (pass level 0.02; not enough)" in b["reasons"]
    assert cert["valid_months"] == 12 and cert["study_date"] == "2024-02-29"


def test_certification_marginal_may_pass_and_default_validity() -> None:
    study = make_study(
        certification={
            "source": "Qualification rule invented for the tests",
            "marginal_is": "pass",
            "rules": [
                {"measure": "accuracy.miss_rate", "pass": 0.02, "marginal": 0.05, "better": "lower"}
            ],
        }
    )
    res = make_results(study, rater={"R2": {"accuracy": {"miss_rate": M(0.04, 0.01, 0.1)}}})
    out = judge(study, res)
    assert [i["outcome"] for i in out["certification"]["inspectors"]] == ["certified", "certified"]
    assert (
        out["certification"]["inspectors"][1]["valid_until"] == "2027-11-30"
    )  # 12 months by default
    assert out["criteria"] is None  # certification without acceptance criteria is allowed


@pytest.mark.parametrize(
    "cert,key,fragment",
    [
        (
            {"rules": [{"measure": "reproducibility.fleiss_kappa", "pass": 0.7}]},
            "certification.rules[0].measure",
            "figure of the whole panel",
        ),
        (
            {"rules": [{"measure": "accuracy.R1.effectiveness", "pass": 0.7}]},
            "certification.rules[0].measure",
            "apply to every inspector",
        ),
        (
            {"valid_months": 0, "rules": [{"measure": "accuracy.effectiveness", "pass": 0.7}]},
            "certification.valid_months",
            "from 1 to 120",
        ),
        (
            {"due_window_days": -1, "rules": [{"measure": "accuracy.effectiveness", "pass": 0.7}]},
            "certification.due_window_days",
            "from 0 to 366",
        ),
        (
            {"valid_month": 6, "rules": [{"measure": "accuracy.effectiveness", "pass": 0.7}]},
            "certification.valid_month",
            "unknown key",
        ),
    ],
)
def test_certification_problems(cert: dict[str, Any], key: str, fragment: str) -> None:
    study = make_study(certification=cert)
    probs = errors(validate_criteria(study, make_results(study)))
    assert any(p.location.key == key and fragment in p.message for p in probs), [
        p.format() for p in probs
    ]


def test_certification_needs_the_study_date() -> None:
    study = make_study(
        date=None,
        certification={
            "source": "T",
            "rules": [{"measure": "accuracy.effectiveness", "pass": 0.7}],
        },
    )
    (p,) = errors(validate_criteria(study, make_results(study)))
    assert p.location.key == "certification" and "study.date" in p.message


# ---------------------------------------------------------------------------------------------
# No criteria, determinism
# ---------------------------------------------------------------------------------------------


def test_no_criteria_is_stated_plainly() -> None:
    study = make_study()
    out = judge(study, make_results(study))
    assert out["criteria"] is None and out["certification"] is None
    assert out["verdict"]["outcome"] is None and out["verdict"]["rules"] == []
    assert (
        out["verdict"]["sentence"]
        == "No acceptance criteria were set for this study, so no verdict is given."
    )
    assert isinstance(out["actions"], list)


def test_output_is_plain_json_and_deterministic() -> None:
    study = make_study(
        criteria={"set": "binary-inspection"},
        certification={
            "source": "T",
            "rules": [{"measure": "accuracy.effectiveness", "pass": 0.9}],
        },
    )
    res = make_results(study, rater={"R2": {"accuracy": {"miss_rate": M(0.3, 0.2, 0.4)}}})
    a = json.dumps(judge(study, res), sort_keys=True, allow_nan=False)
    b = json.dumps(judge(study, json.loads(json.dumps(res))), sort_keys=True, allow_nan=False)
    assert a == b
    out = json.loads(a)
    keys = [(c["rule"], c["rater"]) for c in out["verdict"]["rules"]]
    assert keys == sorted(keys)
    assert [a_["rank"] for a_ in out["actions"]] == list(range(1, len(out["actions"]) + 1))


# ---------------------------------------------------------------------------------------------
# Actions
# ---------------------------------------------------------------------------------------------


def _confusion(study: Study, counts: list[list[int]]) -> dict[str, Any]:
    return {
        "rows": "rater",
        "columns": "reference",
        "categories": list(study.category_codes),
        "counts": counts,
    }


def test_actions_direction_from_miss_and_false_alarm_rates() -> None:
    study = make_study(
        raters=(Rater("R1", "Ann"), Rater("R2", "Bo"), Rater("R3", "Cy")),
        criteria=rules({"measure": "accuracy.*.miss_rate", "pass": 0.05, "better": "lower"}),
    )
    res = make_results(
        study,
        rater={
            # lenient: misses well above false alarms; fails the rule
            "R1": {
                "accuracy": {
                    "effectiveness": M(0.85, 0.8, 0.9),
                    "miss_rate": M(0.30, 0.2, 0.4),
                    "false_alarm_rate": M(0.01, 0.0, 0.05),
                }
            },
            # strict: false alarms well above misses; passes the rule but disagrees often
            "R2": {
                "accuracy": {
                    "effectiveness": M(0.80, 0.75, 0.85),
                    "miss_rate": M(0.0, 0.0, 0.04),
                    "false_alarm_rate": M(0.35, 0.25, 0.45),
                }
            },
            # close to the reference: no action
            "R3": {"accuracy": {"effectiveness": M(0.99, 0.97, 1.0)}},
        },
    )
    acts = judge(study, res)["actions"]
    direction = [
        (a["subject"], a["figures"]["direction"], a["linked_to_verdict"])
        for a in acts
        if a["kind"] == "rater-direction"
    ]
    assert direction == [("R1", "lenient", True), ("R2", "strict", False)]
    assert (
        acts[0]["kind"] == "rater-direction" and acts[0]["subject"] == "R1"
    )  # behind a failing rule
    assert "too lenient" in acts[0]["text"]
    r2 = next(a for a in acts if a["subject"] == "R2" and a["kind"] == "rater-direction")
    assert "too strict" in r2["text"]


def test_actions_ordinal_direction_from_the_mean_offset() -> None:
    study = make_study(scale="ordinal", categories=ORDINAL, defect_category=None)
    res = make_results(
        study,
        rater={
            "R1": {"accuracy": {"effectiveness": M(0.8, 0.7, 0.9)}},
            "R2": {"accuracy": {"effectiveness": M(0.8, 0.7, 0.9)}},
        },
    )
    res["ordinal"] = {
        "accuracy": {
            "R1": {"mean_offset": M(0.3, 0.1, 0.5)},  # stricter than the reference
            "R2": {"mean_offset": M(-0.05, -0.2, 0.1)},  # interval holds 0: no direction
        }
    }
    acts = {a["subject"]: a for a in judge(study, res)["actions"] if a["kind"] == "rater-direction"}
    assert acts["R1"]["figures"]["direction"] == "strict" and "too strict" in acts["R1"]["text"]
    assert acts["R2"]["figures"]["direction"] is None and "no clear direction" in acts["R2"]["text"]


def test_actions_most_confused_pair_and_hard_items() -> None:
    study = make_study(scale="nominal", categories=NOMINAL, defect_category=None)
    res = make_results(
        study,
        rater={
            "R1": {
                "accuracy": {"confusion": _confusion(study, [[20, 1, 0], [6, 15, 0], [0, 2, 30]])}
            },
            "R2": {
                "accuracy": {"confusion": _confusion(study, [[20, 3, 0], [2, 18, 1], [0, 1, 30]])}
            },
        },
    )
    res["items"] = [
        {
            "id": f"I{i}",
            "reference": "A",
            "ratings": 4,
            "agreement": 1.0,
            "all_agree": True,
            "matches_reference": True,
        }
        for i in range(10)
    ]
    res["items"][3].update(agreement=0.5, all_agree=False)
    res["items"][7].update(agreement=0.33, all_agree=False, reference="B")
    res["hard_items"] = ["I7", "I3"]
    acts = judge(study, res)["actions"]
    pair = next(a for a in acts if a["kind"] == "confused-pair")
    # A/B: 1 + 6 + 3 + 2 = 12 ratings; B/C: 2 + 1 + 1 = 4
    assert (
        pair["subject"] == "A/B" and pair["figures"]["count"] == 12 and pair["figures"]["of"] == 149
    )
    assert "A (Scratch) and B (Dent)" in pair["text"]
    hard = next(a for a in acts if a["kind"] == "hard-items")
    assert [r["item"] for r in hard["figures"]["items"]] == ["I7", "I3"]
    assert "I7 (reference B), I3 (reference A)" in hard["text"]
    assert [a["kind"] for a in acts].index("confused-pair") < [a["kind"] for a in acts].index(
        "hard-items"
    )


def test_actions_confused_pair_without_reference_uses_item_counts() -> None:
    study = make_study(
        scale="nominal", categories=NOMINAL, defect_category=None, reference_path=None
    )
    res = make_results(study, reference=False)
    res["items"] = [
        {
            "id": "I1",
            "ratings": 4,
            "counts": {"A": 2, "B": 0, "C": 2},
            "agreement": 1 / 3,
            "all_agree": False,
        },
        {
            "id": "I2",
            "ratings": 4,
            "counts": {"A": 3, "B": 1, "C": 0},
            "agreement": 0.5,
            "all_agree": False,
        },
    ]
    pair = next(a for a in judge(study, res)["actions"] if a["kind"] == "confused-pair")
    assert (
        pair["subject"] == "A/C" and pair["figures"]["count"] == 4 and pair["figures"]["of"] == 12
    )


def test_actions_few_borderline_items_and_wide_intervals() -> None:
    study = make_study()
    res = make_results(study, items=20)
    res["items"] = [
        {
            "id": f"I{i}",
            "ratings": 4,
            "agreement": 1.0,
            "all_agree": True,
            "matches_reference": True,
        }
        for i in range(20)
    ]
    res["items"][0].update(agreement=0.5, all_agree=False)  # 1 of 20 = 5 % < 20 %
    res["caveats"] = {
        "precision": {
            "measure": "reproducibility.fleiss_kappa",
            "half_width": 0.2,
            "target_half_width": 0.1,
            "items": 20,
            "items_needed": 80,
        }
    }
    acts = judge(study, res)["actions"]
    kinds = [a["kind"] for a in acts]
    assert kinds[-2:] == ["few-borderline", "more-items"]
    few = acts[kinds.index("few-borderline")]
    assert few["figures"] == {"items_with_disagreement": 1, "items": 20, "share": 0.05}
    more = acts[kinds.index("more-items")]
    assert more["figures"]["items_needed"] == 80 and "about 80 items" in more["text"]
    # enough borderline items: no such action
    for it in res["items"][:5]:
        it.update(all_agree=False, agreement=0.5)
    assert "few-borderline" not in [a["kind"] for a in judge(study, res)["actions"]]


def test_actions_rater_consistency() -> None:
    study = make_study()
    res = make_results(
        study,
        rater={
            "R2": {
                "repeatability": {
                    "agreement": M(0.8, 0.66, 0.9, agreeing=40),
                    "mixed_calls": 10,
                    "items": 50,
                }
            }
        },
    )
    acts = [a for a in judge(study, res)["actions"] if a["kind"] == "rater-consistency"]
    assert [a["subject"] for a in acts] == ["R2"]
    assert "R2 called 10 of 50 items differently in different trials" in acts[0]["text"]


# ---------------------------------------------------------------------------------------------
# Demo studies, end to end (when the loaders and the analysis are present)
# ---------------------------------------------------------------------------------------------

STUDIES = Path(__file__).resolve().parents[1] / "studies"


def _analysed(name: str) -> tuple[Study, dict[str, Any]]:
    pytest.importorskip("reportgen.ratings")
    pytest.importorskip("reportgen.stats.bootstrap")
    from reportgen.analysis import analyse
    from reportgen.ratings import load_ratings
    from reportgen.study import load_study

    path = STUDIES / name / "study.yaml"
    if not path.exists():
        pytest.skip(f"demo study {name} not present")
    study = load_study(path)
    return study, analyse(study, load_ratings(study))


def test_demo_seal_check_must_improve() -> None:
    study, res = _analysed("seal-check")
    assert errors(validate_criteria(study, res)) == []
    out = judge(study, res)
    assert out["verdict"]["outcome"] == "IMPROVE"
    # issue 12: no inspector is certified whom a criterion of the study rates short (INS-A's
    # 5.3 % miss rate is short of the 2 % criterion, so INS-A is no longer certified)
    for insp in out["certification"]["inspectors"]:
        mine = [c for c in out["verdict"]["rules"] if c["rater"] == insp["rater"]]
        if any(c["outcome"] != "meets" for c in mine):
            assert insp["outcome"] == "not certified", insp["rater"]
    ins_a = out["certification"]["inspectors"][0]
    assert ins_a["rater"] == "INS-A" and ins_a["criteria_met"] is False
    assert any(
        a["kind"] == "rater-direction" and a["figures"]["direction"] == "lenient"
        for a in out["actions"]
    )
    assert any(
        a["kind"] == "rater-direction" and a["figures"]["direction"] == "strict"
        for a in out["actions"]
    )


def test_demo_finish_grading_passes() -> None:
    study, res = _analysed("finish-grading")
    out = judge(study, res)
    assert out["verdict"]["outcome"] == "PASS", out["verdict"]["sentence"]


def test_demo_defect_triage_turns_on_the_interval() -> None:
    study, res = _analysed("defect-triage")
    out = judge(study, res)
    (check,) = out["verdict"]["rules"]
    assert check["judge"] == "lower_bound"
    assert (
        check["estimate"] >= check["pass"] > check["value"]
    )  # estimate meets, lower bound does not
    assert out["verdict"]["outcome"] == "IMPROVE"
    assert check["settle"]["items_needed"] > res["design"]["items"]


def test_readme_prints_each_shipped_set_with_its_source_and_caution() -> None:
    readme = Path(__file__).resolve().parents[1] / "README.md"
    text = readme.read_text(encoding="utf-8")
    section = text[text.index("## Acceptance criteria and certification") :]
    for cs in CRITERIA_SETS.values():
        assert f"**`{cs.name}`**" in section
        assert f'Source: "{cs.source}"' in section
        assert f'Caution: "{cs.caution}"' in section


@pytest.mark.parametrize(
    "criteria,key,fragment",
    [
        (
            [{"measure": "reproducibility.fleiss_kappa", "pass": 0.7}],
            "criteria",
            "must be a mapping",
        ),
        ({"source": "x", "rules": []}, "criteria.rules", "non-empty list"),
        ({"source": "x"}, "criteria", "missing key 'rules'"),
        ({"set": "kappa-bands", "source": "mine"}, "criteria.source", "unknown key 'source'"),
        (
            {
                "source": "x",
                "marginal_is": "fail",
                "rules": [{"measure": "reproducibility.fleiss_kappa", "pass": 0.7}],
            },
            "criteria.marginal_is",
            "must be one of improve, pass",
        ),
    ],
)
def test_criteria_shape_problems(criteria: Any, key: str, fragment: str) -> None:
    study = make_study(criteria=criteria)
    probs = errors(validate_criteria(study, make_results(study)))
    assert any(p.location.key == key and fragment in p.message for p in probs), [
        p.format() for p in probs
    ]


def test_ordinal_agreement_shares_can_be_named_in_an_ordinal_study_with_a_reference() -> None:
    from reportgen.study import load_study

    study = load_study(Path(__file__).parent.parent / "studies/finish-grading/study.yaml")
    m = applicable_measures(study, has_reference=True)
    for path in (
        "accuracy.*.exact_agreement",
        "accuracy.*.within_one_agreement",
        "panel_accuracy.exact_agreement",
        "panel_accuracy.within_one_agreement",
    ):
        assert path in m
    nominal = make_study(scale="nominal", categories=NOMINAL, defect_category=None)
    assert "accuracy.*.within_one_agreement" not in applicable_measures(nominal, has_reference=True)
