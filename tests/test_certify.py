"""Certification held to the study's evidence (issue 12, part 1): reportgen.certify.

The zero-failure count is the success-run relation n = ln(1 - C) / ln(1 - L): with no event in
n ratings the one-sided exact upper bound of the rate is 1 - (1 - C)^(1/n) (Clopper & Pearson
1934), which reaches L first at that n.
"""

from __future__ import annotations

import math
import shutil
from pathlib import Path
from typing import Any

import pytest
from test_verdict import M, errors, make_results, make_study, rules

from reportgen.certify import independence_notes, rate_demonstrability
from reportgen.verdict import judge, validate_criteria

SEAL = Path(__file__).resolve().parents[1] / "studies" / "seal-check"


def test_zero_failure_count_matches_the_success_run_relation() -> None:
    # Clopper & Pearson (1934): 0 events in n gives the one-sided upper bound 1 - (1 - C)^(1/n);
    # for L = 0.02, C = 0.95: ln(0.05) / ln(0.98) = 148.28, so 149 ratings (issue 12's figure)
    assert math.ceil(math.log(0.05) / math.log(0.98)) == 149
    why = rate_demonstrability(0.02, 57, 0.95)
    assert why is not None and "149 ratings" in why and "there are 57" in why
    assert rate_demonstrability(0.02, 149, 0.95) is None
    assert rate_demonstrability(0.02, 148, 0.95) is not None
    # 1 - 0.05 ** (1 / 149) <= 0.02 < 1 - 0.05 ** (1 / 148): the bound itself
    assert 1 - 0.05 ** (1 / 149) <= 0.02 < 1 - 0.05 ** (1 / 148)


def _cert(*rs: dict[str, Any]) -> dict[str, Any]:
    return {"source": "Qualification rule invented for the tests", "rules": list(rs)}


def test_a_criterion_short_stops_certification_even_when_the_certification_rules_meet() -> None:
    study = make_study(
        criteria=rules(
            {"measure": "accuracy.*.miss_rate", "pass": 0.02, "marginal": 0.05, "better": "lower"}
        ),
        certification=_cert({"measure": "accuracy.effectiveness", "pass": 0.8}),
    )
    res = make_results(study, rater={"R2": {"accuracy": {"miss_rate": M(0.053, 0.01, 0.1)}}})
    out = judge(study, res)
    a, b = out["certification"]["inspectors"]
    assert a["outcome"] == "certified" and a["criteria_met"] is True
    assert b["outcome"] == "not certified" and b["criteria_met"] is False
    assert any("criteria rule 1: miss rate 0.053 falls short" in r for r in b["reasons"])
    # every certification check of R2 meets: only the criterion stops it
    assert all(c["outcome"] == "meets" for c in b["checks"])


def test_marginal_criterion_counts_as_the_criteria_say() -> None:
    crit = {"measure": "accuracy.*.miss_rate", "pass": 0.02, "marginal": 0.05, "better": "lower"}
    res_over = {"R2": {"accuracy": {"miss_rate": M(0.04, 0.01, 0.1)}}}
    for marginal_is, expected in (("pass", "certified"), ("improve", "not certified")):
        study = make_study(
            criteria=rules(crit, marginal_is=marginal_is),
            certification=_cert({"measure": "accuracy.effectiveness", "pass": 0.8}),
        )
        out = judge(study, make_results(study, rater=res_over))
        assert out["certification"]["inspectors"][1]["outcome"] == expected


@pytest.mark.parametrize(
    "cert_rule,looser",
    [
        ({"measure": "accuracy.miss_rate", "pass": 0.06, "better": "lower"}, True),
        ({"measure": "accuracy.miss_rate", "pass": 0.02, "better": "lower"}, False),
        ({"measure": "accuracy.miss_rate", "pass": 0.01, "better": "lower"}, False),
        ({"measure": "accuracy.effectiveness", "pass": 0.5}, False),  # adds a measure
    ],
)
def test_certification_may_tighten_never_loosen(cert_rule: dict[str, Any], looser: bool) -> None:
    study = make_study(
        criteria=rules({"measure": "accuracy.*.miss_rate", "pass": 0.02, "better": "lower"}),
        certification=_cert(cert_rule),
    )
    probs = [
        p for p in errors(validate_criteria(study, make_results(study))) if "looser" in p.message
    ]
    assert bool(probs) is looser
    if looser:
        (p,) = probs
        assert p.location.key == "certification.rules[0]"
        assert "certification rule 1" in p.message and "criteria rule 1" in p.message


def test_judging_the_estimate_is_looser_than_a_bound() -> None:
    study = make_study(
        criteria=rules(
            {"measure": "accuracy.*.effectiveness", "pass": 0.8, "judge": "lower_bound"}
        ),
        certification=_cert({"measure": "accuracy.effectiveness", "pass": 0.9}),
    )
    assert any("looser" in p.message for p in errors(validate_criteria(study, make_results(study))))


def test_certification_rules_need_a_source() -> None:
    study = make_study(
        certification={"rules": [{"measure": "accuracy.effectiveness", "pass": 0.8}]}
    )
    (p,) = errors(validate_criteria(study, make_results(study)))
    assert p.location.key == "certification" and "come from" in p.message


def test_independence_warning_names_the_rater_and_role() -> None:
    from reportgen.model import SignOff

    study = make_study(
        signoff=SignOff(prepared_by="Ann, line QA", reviewed_by="Dr. Q. Other", approved_by=None),
        certification=_cert({"measure": "accuracy.effectiveness", "pass": 0.8}),
    )
    notes = independence_notes(study)
    assert [(n["rater"], n["role"]) for n in notes] == [("R1", "prepared_by")]
    warns = [p for p in validate_criteria(study, make_results(study)) if p.severity == "warning"]
    assert any(
        p.location.key == "signoff.prepared_by" and "Not independent" in p.message for p in warns
    )
    out = judge(study, make_results(study))
    assert out["certification"]["independence"][0]["rater"] == "R1"
    assert any("Not independent" in r for r in out["certification"]["inspectors"][0]["reasons"])
    # a name merely containing a rater's name as part of a word is not a match
    other = make_study(signoff=SignOff(prepared_by="Annette Boll"))
    assert independence_notes(other) == []


def test_certification_note_beside_an_undemonstrable_rate() -> None:
    study = make_study(
        certification=_cert({"measure": "accuracy.miss_rate", "pass": 0.02, "better": "lower"})
    )
    res = make_results(study)
    res["accuracy"]["R1"]["miss_rate"] = M(0.0, 0.0, 0.05, items=57)
    out = judge(study, res)
    r1 = out["certification"]["inspectors"][0]
    assert r1["checks"][0]["demonstrable"] is not None
    assert any("149 ratings" in r and "there are 57" in r for r in r1["reasons"])


def test_safety_related_shipped_set_judges_rates_on_the_one_sided_bound() -> None:
    plain = make_study(criteria={"set": "binary-inspection"})
    safety = make_study(criteria={"set": "binary-inspection"}, safety_related=True)
    for study, judged in ((plain, "estimate"), (safety, "upper_bound")):
        out = judge(study, make_results(study))
        rates = [r for r in out["criteria"]["rules"] if r["better"] == "lower"]
        assert rates and all(r["judge"] == judged for r in rates)
        if judged == "upper_bound":
            assert all(r["confidence"] == study.confidence for r in rates)


@pytest.fixture
def seal(tmp_path: Path) -> Path:
    target = tmp_path / "seal"
    shutil.copytree(SEAL, target)
    return target / "study.yaml"


def test_check_refuses_a_looser_certification_rule_naming_both(
    seal: Path, run_cli: Any, tmp_path: Path
) -> None:
    text = seal.read_text(encoding="utf-8")
    seal.write_text(
        text.replace(
            "{measure: accuracy.miss_rate, pass: 0.02, better: lower, judge: estimate}",
            "{measure: accuracy.miss_rate, pass: 0.06, better: lower, judge: estimate}",
        ),
        encoding="utf-8",
    )
    code, out, err = run_cli("check", seal)
    assert code == 2
    assert "study.yaml:55:7" in err and "certification rule 3" in err
    assert "criteria rule 2" in err and "study.yaml:38" in err
    code, out, err = run_cli("build", seal, "-o", tmp_path / "out", "--no-pdf", "-q")
    assert code == 2 and not (tmp_path / "out").exists()


def test_check_warns_when_a_rater_signs_off(seal: Path, run_cli: Any) -> None:
    text = seal.read_text(encoding="utf-8")
    seal.write_text(
        text.replace(
            'prepared_by: "Marta Oyelaran, packaging QA"', 'prepared_by: "Lena Brauer, QA"'
        ),
        encoding="utf-8",
    )
    code, out, err = run_cli("check", seal)
    assert code == 0
    assert "signoff.prepared_by" in out + err and "Lena Brauer (INS-A)" in out + err
    code, out, err = run_cli("check", seal, "--strict")
    assert code == 4


def test_demo_studies_certify_no_rater_a_criterion_rates_short() -> None:
    from reportgen.analysis import analyse
    from reportgen.ratings import load_ratings
    from reportgen.study import load_study

    seen = 0
    for path in sorted((SEAL.parent).glob("*/study.yaml")):
        study = load_study(path)
        if study.certification is None:
            continue
        out = judge(study, analyse(study, load_ratings(study)))
        marginal_ok = out["criteria"]["marginal_is"] == "pass" if out["criteria"] else True
        for insp in out["certification"]["inspectors"]:
            mine = [c for c in out["verdict"]["rules"] if c["rater"] == insp["rater"]]
            bad = [
                c
                for c in mine
                if c["outcome"] == "short" or (c["outcome"] == "marginal" and not marginal_ok)
            ]
            if bad:
                assert insp["outcome"] == "not certified", (path, insp["rater"])
        assert out["certification"]["source"]
        assert out["certification"]["independence"] == []
        seen += 1
    assert seen >= 1
