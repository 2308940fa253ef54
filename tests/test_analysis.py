"""The analysis layer: layouts, counting conventions, schema, degenerate studies.

Hand-counted figures come from tiny designs small enough to count on paper (the counts are
written out beside each check).  Published checks run published data through the layouts:
Fleiss (1971) psychiatric diagnoses, Cohen (1960) 200-item table.
"""

from __future__ import annotations

import json
import math
import time
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from reportgen.analysis import SCHEMA, analyse
from reportgen.model import Category, Rater, Ratings, Study

M_KEYS = {"estimate", "se", "ci_low", "ci_high", "ci_method", "p_value", "items", "agreeing"}


def make_study(
    *,
    scale: str = "binary",
    codes: tuple[str, ...] = ("G", "D"),
    raters: tuple[str, ...] = ("R1", "R2"),
    trials: int = 2,
    defect: str | None = "D",
    values: tuple[float, ...] | None = None,
    **overrides: Any,
) -> Study:
    cats = tuple(
        Category(code=c, label=f"label {c}", value=None if values is None else values[i])
        for i, c in enumerate(codes)
    )
    fields: dict[str, Any] = dict(
        path=Path("/tmp/study.yaml"),
        id="T-1",
        title="Test study",
        purpose=None,
        characteristic=None,
        station=None,
        revision=1,
        date=None,
        scale=scale,
        categories=cats,
        raters=tuple(Rater(id=r, name=r) for r in raters),
        trials=trials,
        ratings_path=Path("/tmp/ratings.csv"),
        defect_category=defect,
        bootstrap_resamples=0,
    )
    fields.update(overrides)
    return Study(**fields)


def make_ratings(study: Study, codes: np.ndarray, reference: list[int] | None = None) -> Ratings:
    codes = np.asarray(codes, dtype=np.int8)
    return Ratings(
        items=tuple(f"I{i + 1}" for i in range(codes.shape[0])),
        raters=study.rater_ids,
        categories=study.category_codes,
        codes=codes,
        reference=None if reference is None else np.asarray(reference, dtype=np.int8),
    )


def dumps(results: dict[str, Any]) -> str:
    return json.dumps(results, allow_nan=False)


# ---------------------------------------------------------------------------------------------
# Design A: binary, 4 items × 2 raters × 2 trials, G = 0 (conforming), D = 1 (defect)
#   reference  I1 D, I2 D, I3 G, I4 G
#   R1         I1 D D, I2 D G, I3 G G, I4 G G
#   R2         I1 D D, I2 G G, I3 G D, I4 G G
# ---------------------------------------------------------------------------------------------
G, D = 0, 1
CODES_A = np.array(
    [
        [[D, D], [D, D]],
        [[D, G], [G, G]],
        [[G, G], [G, D]],
        [[G, G], [G, G]],
    ]
)
REF_A = [D, D, G, G]


@pytest.fixture
def design_a() -> dict[str, Any]:
    study = make_study()
    res = analyse(study, make_ratings(study, CODES_A, REF_A))
    dumps(res)
    return res


def test_schema_and_design(design_a: dict[str, Any]) -> None:
    res = design_a
    assert res["schema"] == SCHEMA == "reportgen-results/1"
    assert res["study"]["id"] == "T-1" and res["study"]["revision"] == 1
    assert {"items", "raters", "trials", "categories", "scale", "ratings", "missing"} <= set(
        res["design"]
    )
    assert (
        res["design"]["items"] == 4
        and res["design"]["raters"] == 2
        and res["design"]["trials"] == 2
    )
    assert res["design"]["ratings"] == 16 and res["design"]["missing"] == 0
    assert [c["code"] for c in res["design"]["categories"]] == ["G", "D"]
    for key in (
        "repeatability",
        "accuracy",
        "reproducibility",
        "panel_accuracy",
        "caveats",
        "items",
        "warnings",
    ):
        assert key in res
    assert "ordinal" not in res  # binary scale
    # every measure record has exactly the M keys
    for rid in ("R1", "R2"):
        for m in ("agreement", "fleiss_kappa"):
            assert set(res["repeatability"][rid][m]) == M_KEYS
        for m in ("agreement", "effectiveness", "cohen_kappa", "miss_rate", "false_alarm_rate"):
            assert set(res["accuracy"][rid][m]) == M_KEYS
        # ordinal-only measures are absent, not zero
        assert "weighted_kappa" not in res["accuracy"][rid]
        assert "kendall_tau_b" not in res["accuracy"][rid]
    rp = res["reproducibility"]
    for m in (
        "agreement",
        "fleiss_kappa",
        "krippendorff_alpha",
        "gwet_ac1",
        "conger_kappa",
        "light_kappa",
        "brennan_prediger",
    ):
        assert set(rp[m]) == M_KEYS, m
    for absent in ("gwet_ac2", "kendall_w", "krippendorff_alpha_interval"):
        assert absent not in rp
    assert set(rp["fleiss_kappa_by_category"]) == {"G", "D"}
    assert set(rp["by_trial"]) == {"1", "2"}


def test_repeatability_hand_counts(design_a: dict[str, Any]) -> None:
    rep = design_a["repeatability"]
    # R1 keeps its call on I1, I3, I4 (3 of 4); R2 on I1, I2, I4 (3 of 4)
    for rid in ("R1", "R2"):
        assert rep[rid]["agreement"]["agreeing"] == 3
        assert rep[rid]["agreement"]["items"] == 4
        assert rep[rid]["agreement"]["estimate"] == 0.75
        assert rep[rid]["mixed_calls"] == 1
    # R1 counts (G, D) per item: (0,2) (1,1) (2,0) (2,0): P = 3/4, p = (5/8, 3/8), Pe = 34/64,
    # kappa = (3/4 - 34/64) / (1 - 34/64) = 7/15 (Fleiss 1971 estimator, counted by hand)
    assert rep["R1"]["fleiss_kappa"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)


def test_accuracy_hand_counts(design_a: dict[str, Any]) -> None:
    acc = design_a["accuracy"]
    r1, r2 = acc["R1"], acc["R2"]
    # R1 matches the reference on every trial of I1, I3, I4; R2 on I1, I4
    assert (r1["agreement"]["agreeing"], r1["agreement"]["items"]) == (3, 4)
    assert (r2["agreement"]["agreeing"], r2["agreement"]["items"]) == (2, 4)
    # effectiveness per rating: R1 7 of 8, R2 5 of 8
    assert (r1["effectiveness"]["agreeing"], r1["effectiveness"]["items"]) == (7, 8)
    assert r2["effectiveness"]["estimate"] == 5 / 8
    # misses: R1 called I2 (defect) G once of 4 defect ratings; R2 twice
    assert (r1["miss_rate"]["agreeing"], r1["miss_rate"]["items"]) == (1, 4)
    assert r2["miss_rate"]["estimate"] == 0.5
    # false alarms: R1 none of 4 conforming ratings; R2 once (I3 trial 2)
    assert r1["false_alarm_rate"]["estimate"] == 0.0
    assert r2["false_alarm_rate"]["estimate"] == 0.25
    assert r2["counts"] == {
        "ratings": 8,
        "matching": 5,
        "defect_reference_ratings": 4,
        "misses": 2,
        "conforming_reference_ratings": 4,
        "false_alarms": 1,
    }
    # confusion, rows = rater, columns = reference: R1 [[4, 1], [0, 3]], R2 [[3, 2], [1, 2]]
    assert r1["confusion"]["counts"] == [[4, 1], [0, 3]]
    assert r2["confusion"]["counts"] == [[3, 2], [1, 2]]
    assert r1["confusion"]["categories"] == ["G", "D"]
    # Cohen's kappa: R1 p_o 7/8, p_e 1/2 -> 0.75; R2 p_o 5/8, p_e 1/2 -> 0.25
    assert r1["cohen_kappa"]["estimate"] == pytest.approx(0.75, abs=1e-12)
    assert r2["cohen_kappa"]["estimate"] == pytest.approx(0.25, abs=1e-12)
    # two trials: the item is the unit (issue 12). R1's matches per item 2, 1, 2, 2 of 2:
    # p = 7/8; cluster-robust V = 4/3 * (3 * 0.25^2 + 0.75^2) / 8^2 = 1/64; binomial 7/512;
    # design effect D = 8/7 (Rao & Scott 1992), effective n = 7, effective events 6.125;
    # Wilson (1927) on those, cross-checked with statsmodels' proportion_confint
    from statsmodels.stats.proportion import proportion_confint

    lo, hi = proportion_confint(6.125, 7, alpha=0.05, method="wilson")
    assert r1["effectiveness"]["ci_low"] == pytest.approx(lo, rel=1e-9)
    assert r1["effectiveness"]["ci_high"] == pytest.approx(hi, rel=1e-9)
    assert design_a["design"]["rate_intervals"]["design_effects"][
        "accuracy.R1.effectiveness"
    ] == pytest.approx(8 / 7, rel=1e-12)


def test_reproducibility_and_panel_hand_counts(design_a: dict[str, Any]) -> None:
    rp = design_a["reproducibility"]
    # all four ratings agree on I1 and I4 only
    assert (rp["agreement"]["agreeing"], rp["agreement"]["items"]) == (2, 4)
    # pooled counts (G, D): (0,4) (3,1) (3,1) (4,0): P_i 1, 1/2, 1/2, 1 -> 3/4; Pe 34/64 -> 7/15
    assert rp["fleiss_kappa"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)
    # item × trial units, R1 vs R2: table [[4, 1], [1, 2]] -> p_o 3/4, p_e 34/64 -> 7/15;
    # with two raters Light's kappa is that one Cohen's kappa, and Conger's equals it too
    assert rp["pairwise_cohen_kappa"]["R1"]["R2"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)
    assert rp["pairwise_cohen_kappa"]["R2"]["R1"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)
    assert rp["light_kappa"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)
    assert rp["conger_kappa"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)
    # trial 1: R1 D D G G, R2 D G G G -> all agree on 3 of 4 items
    assert (
        rp["by_trial"]["1"]["agreement"]["agreeing"],
        rp["by_trial"]["1"]["agreement"]["items"],
    ) == (3, 4)
    pa = design_a["panel_accuracy"]
    assert (pa["agreement"]["agreeing"], pa["agreement"]["items"]) == (2, 4)
    assert pa["effectiveness"]["estimate"] == 12 / 16
    assert (pa["miss_rate"]["agreeing"], pa["miss_rate"]["items"]) == (3, 8)
    assert (pa["false_alarm_rate"]["agreeing"], pa["false_alarm_rate"]["items"]) == (1, 8)


def test_items_and_hard_items(design_a: dict[str, Any]) -> None:
    items = {it["id"]: it for it in design_a["items"]}
    assert items["I1"] == {
        "id": "I1",
        "reference": "D",
        "ratings": 4,
        "counts": {"G": 0, "D": 4},
        "agreement": 1.0,
        "all_agree": True,
        "matching_reference": 4,
        "matches_reference": True,
    }
    # I2: G 3, D 1 -> agreeing pairs 3·2 of 4·3 = 1/2; 1 of 4 ratings matches reference D
    assert items["I2"]["agreement"] == 0.5
    assert items["I2"]["matching_reference"] == 1 and items["I2"]["matches_reference"] is False
    # I2 and I3 both have agreement 1/2; I2 matches the reference less often, so it comes first
    assert design_a["hard_items"] == ["I2", "I3"]


def test_caveats_binary(design_a: dict[str, Any]) -> None:
    cv = design_a["caveats"]
    assert cv["categories"] == 2 and cv["categories_used"] == 2
    assert cv["category_shares"] == {"G": 10 / 16, "D": 6 / 16}
    r1 = cv["accuracy"]["R1"]
    # table [[4, 1], [0, 3]]: p_o 7/8, p_e 1/2, kappa_max (Cohen 1960): p_oM = 1/2 + 3/8 -> 0.75
    assert r1["observed_agreement"] == 7 / 8 and r1["chance_agreement"] == 0.5
    assert r1["kappa_max"] == pytest.approx(0.75, abs=1e-12)
    # Byrt, Bishop & Carlin (1993): PABAK = 2 p_o - 1, PI = |a - d| / n, BI = |b - c| / n
    assert r1["pabak"] == pytest.approx(0.75, abs=1e-12)
    assert r1["prevalence_index"] == pytest.approx(1 / 8)
    assert r1["bias_index"] == pytest.approx(1 / 8)
    assert cv["reproducibility"]["observed_agreement"] == pytest.approx(0.75)
    assert cv["reproducibility"]["chance_agreement"] == pytest.approx(34 / 64)
    # R1 vs R2 over item × trial units, table [[4, 1], [1, 2]]: margins (5/8, 3/8) both ways,
    # so the largest kappa the margins allow is 1 (Cohen 1960: p_oM = Σ min = 1)
    assert cv["pairs"] == [
        {
            "raters": ["R1", "R2"],
            "observed_agreement": 0.75,
            "chance_agreement": pytest.approx(34 / 64),
            "kappa_max": pytest.approx(1.0),
        }
    ]
    prec = cv["precision"]
    assert prec["measure"] == "reproducibility.fleiss_kappa"
    hw = (prec["ci_high"] - prec["ci_low"]) / 2
    assert prec["half_width"] == pytest.approx(hw)
    assert prec["items_needed"] == math.ceil(4 * (hw / 0.10) ** 2 - 1e-9)
    assert cv["missing"]["missing"] == 0 and cv["missing"]["expected_ratings"] == 16


def test_conventions_stated(design_a: dict[str, Any]) -> None:
    conv = design_a["conventions"]
    for key in (
        "repeatability.agreement",
        "accuracy.effectiveness",
        "accuracy.miss_rate",
        "reproducibility.fixed_raters",
        "ordinal.offset",
        "caveats.items_needed",
    ):
        assert isinstance(conv[key], str) and conv[key]


# ---------------------------------------------------------------------------------------------
# Design B: ordinal A < B < C (A best), 3 items × 2 raters × 1 trial, reference A, B, C
#   R1: A C C  (offsets 0, +1, 0)      R2: B B B  (offsets +1, 0, -1)
# ---------------------------------------------------------------------------------------------


@pytest.fixture
def design_b() -> dict[str, Any]:
    study = make_study(scale="ordinal", codes=("A", "B", "C"), trials=1, defect=None)
    codes = np.array([[[0], [1]], [[2], [1]], [[2], [1]]])
    res = analyse(study, make_ratings(study, codes, [0, 1, 2]))
    dumps(res)
    return res


def test_ordinal_offsets_and_steps(design_b: dict[str, Any]) -> None:
    od = design_b["ordinal"]
    r1, r2 = od["accuracy"]["R1"], od["accuracy"]["R2"]
    assert r1["offsets"] == {"-2": 0, "-1": 0, "0": 2, "1": 1, "2": 0}
    assert r2["offsets"] == {"-2": 0, "-1": 1, "0": 1, "1": 1, "2": 0}
    assert (r1["exact"]["agreeing"], r1["exact"]["items"]) == (2, 3)
    assert r1["within_one_step"]["estimate"] == 1.0
    # R1 rates one item a step worse than the reference: stricter, mean offset +1/3;
    # item-clustered SE with one rating per item = sample sd / sqrt(n) = sqrt(1/3)/sqrt(3) = 1/3
    assert r1["mean_offset"]["estimate"] == pytest.approx(1 / 3)
    assert r1["mean_offset"]["se"] == pytest.approx(1 / 3)
    assert r2["mean_offset"]["estimate"] == pytest.approx(0.0)
    # pairs within items: (A,B) (C,B) (C,B) -> three pairs one step apart
    assert od["reproducibility"]["steps_apart"] == {"0": 0, "1": 3, "2": 0}
    assert od["reproducibility"]["exact_share"] == 0.0
    assert od["reproducibility"]["within_one_step_share"] == 1.0
    assert "repeatability" not in od  # one trial


def test_ordinal_measures_present(design_b: dict[str, Any]) -> None:
    from scipy.stats import kendalltau

    acc = design_b["accuracy"]["R1"]
    for m in ("weighted_kappa", "kendall_tau_b"):
        assert set(acc[m]) == M_KEYS
    assert "miss_rate" not in acc  # no defect category declared
    # tau-b of (A, C, C) against (A, B, C): 2 concordant pairs, one tie in x -> 2 / sqrt(2 · 3)
    assert acc["kendall_tau_b"]["estimate"] == pytest.approx(2 / math.sqrt(6), abs=1e-12)
    assert acc["kendall_tau_b"]["estimate"] == pytest.approx(
        kendalltau([0, 2, 2], [0, 1, 2]).statistic
    )
    rp = design_b["reproducibility"]
    for m in ("gwet_ac2", "kendall_w", "krippendorff_alpha"):
        assert m in rp
    assert "by_trial" not in rp  # one trial: by_trial would repeat the pooled figures
    assert "repeatability" not in design_b
    assert any(w["measure"] == "repeatability" for w in design_b["warnings"])


def test_ordinal_weighted_kappa_uses_declared_categories() -> None:
    """Weights come from the declared list: an unused category still widens the scale.

    Cohen (1968) linear weights w = 1 - |i - j| / (k - 1); with 4 declared categories and only
    the first three used, the weights differ from those over the three observed ones.
    """
    study = make_study(
        scale="ordinal", codes=("A", "B", "C", "X"), raters=("R1",), trials=1, defect=None
    )
    rater = [0, 1, 2, 1, 0, 2]
    ref = [0, 1, 1, 2, 0, 2]
    res = analyse(study, make_ratings(study, np.array(rater).reshape(6, 1, 1), ref))
    from sklearn.metrics import cohen_kappa_score

    # sklearn builds weights over the labels passed; pass the declared four
    want = cohen_kappa_score(rater, ref, labels=[0, 1, 2, 3], weights="linear")
    assert res["accuracy"]["R1"]["weighted_kappa"]["estimate"] == pytest.approx(want, abs=1e-12)


def test_interval_alpha_only_with_values() -> None:
    study = make_study(scale="ordinal", codes=("A", "B", "C"), defect="C", values=(1.0, 2.0, 4.0))
    codes = np.array([[[0, 0], [0, 1]], [[1, 1], [1, 2]], [[2, 2], [2, 2]], [[0, 1], [1, 1]]])
    res = analyse(study, make_ratings(study, codes, [0, 1, 2, 1]))
    assert set(res["reproducibility"]["krippendorff_alpha_interval"]) == M_KEYS
    # ordinal with a defect category: miss and false alarm rates apply
    assert "miss_rate" in res["accuracy"]["R1"] and "false_alarm_rate" in res["panel_accuracy"]
    # repeatability steps apart per rater: R2 I1 (A,B), I2 (B,C) one step, I4 (B,B) 0
    assert res["ordinal"]["repeatability"]["R2"]["steps_apart"] == {"0": 2, "1": 2, "2": 0}
    dumps(res)


# ---------------------------------------------------------------------------------------------
# published data through the layouts
# ---------------------------------------------------------------------------------------------

# Fleiss (1971) psychiatric diagnoses, 30 patients × 6 ratings (rating slots), codes 1..5
DIAGNOSES = """4,4,4,4,4,4 2,2,2,5,5,5 2,3,3,3,3,5 5,5,5,5,5,5 2,2,2,4,4,4 1,1,3,3,3,3 3,3,3,3,5,5
1,1,3,3,3,4 1,1,4,4,4,4 5,5,5,5,5,5 1,4,4,4,4,4 1,2,4,4,4,4 2,2,2,3,3,3 1,4,4,4,4,4 2,2,4,4,4,5
3,3,3,3,3,5 1,1,1,4,5,5 1,1,1,1,1,2 2,2,4,4,4,4 1,3,3,5,5,5 5,5,5,5,5,5 2,4,4,4,4,4 2,2,4,5,5,5
1,1,4,4,4,4 1,4,4,4,4,5 2,2,2,2,2,4 1,1,1,1,5,5 2,2,4,4,4,4 1,3,3,3,3,3 5,5,5,5,5,5"""


def diagnoses_codes() -> np.ndarray:
    rows = [[int(x) - 1 for x in row.split(",")] for row in DIAGNOSES.split()]
    return np.array(rows)


def test_fleiss_1971_diagnoses_through_reproducibility() -> None:
    """Six rating columns as six raters, one trial (REFERENCE-CHECKS F2)."""
    raters = tuple(f"P{i}" for i in range(1, 7))
    study = make_study(
        scale="nominal", codes=("1", "2", "3", "4", "5"), raters=raters, trials=1, defect=None
    )
    res = analyse(study, make_ratings(study, diagnoses_codes()[:, :, None]))
    rp = res["reproducibility"]
    # Fleiss (1971): kappa .430 (R irr 0.4302445); per category .245 .245 .520 .471 .566
    assert rp["fleiss_kappa"]["estimate"] == pytest.approx(0.4302445, abs=5e-8)
    by_cat = [rp["fleiss_kappa_by_category"][c]["estimate"] for c in "12345"]
    assert by_cat == pytest.approx([0.245, 0.245, 0.520, 0.471, 0.566], abs=5e-4)
    # Fleiss, Nee & Landis (1979) z as printed by R irr: 17.65183 -> p far below 1e-10
    assert rp["fleiss_kappa"]["p_value"] < 1e-10
    # Light (1971) mean pairwise Cohen: R irr documentation 0.459
    assert rp["light_kappa"]["estimate"] == pytest.approx(0.459, abs=5e-4)
    # Conger (1980): irrCAC 0.441809 (library value, REFERENCE-CHECKS F2)
    assert rp["conger_kappa"]["estimate"] == pytest.approx(0.4418085, abs=5e-7)
    # Krippendorff's alpha nominal 0.4334098 (krippendorff library, REFERENCE-CHECKS F2)
    assert rp["krippendorff_alpha"]["estimate"] == pytest.approx(0.4334098, abs=5e-7)
    # Gwet's AC1 0.4478845 (irrCAC 0.447885, REFERENCE-CHECKS F2)
    assert rp["gwet_ac1"]["estimate"] == pytest.approx(0.4478845, abs=5e-7)
    # all six ratings agree on patients 1, 4, 10, 21, 30
    assert (rp["agreement"]["agreeing"], rp["agreement"]["items"]) == (5, 30)
    assert "repeatability" not in res and "accuracy" not in res
    dumps(res)


def test_cohen_1960_table_through_accuracy() -> None:
    """Cohen (1960) 200-item table as one rater against the reference (REFERENCE-CHECKS C1).

    Published: kappa .492; FCE (1969) non-null SE 0.0510018 (statsmodels, vcd, irrCAC agree).
    """
    table = np.array([[88, 14, 18], [10, 40, 10], [2, 6, 12]])  # rows rater, columns reference
    rater, ref = [], []
    for i in range(3):
        for j in range(3):
            rater += [i] * int(table[i, j])
            ref += [j] * int(table[i, j])
    study = make_study(scale="nominal", codes=("a", "b", "c"), raters=("J",), trials=1, defect=None)
    res = analyse(study, make_ratings(study, np.array(rater).reshape(-1, 1, 1), ref))
    ck = res["accuracy"]["J"]["cohen_kappa"]
    assert ck["estimate"] == pytest.approx(0.492, abs=5e-4)
    assert ck["se"] == pytest.approx(0.0510018, abs=5e-7)
    assert res["accuracy"]["J"]["confusion"]["counts"] == table.tolist()
    # kappa_max from the margins, Cohen (1960): 0.8305085 (REFERENCE-CHECKS C1)
    assert res["caveats"]["accuracy"]["J"]["kappa_max"] == pytest.approx(0.8305085, abs=5e-7)
    assert res["caveats"]["accuracy"]["J"]["chance_agreement"] == pytest.approx(0.41, abs=5e-3)
    assert "reproducibility" not in res  # one rater
    assert any(w["measure"] == "reproducibility" for w in res["warnings"])


# ---------------------------------------------------------------------------------------------
# degenerate studies: defined results with words, never a crash, NaN or a misleading 1.0
# ---------------------------------------------------------------------------------------------


def test_all_ratings_one_category() -> None:
    study = make_study()
    codes = np.zeros((5, 2, 2), dtype=np.int8)
    res = analyse(study, make_ratings(study, codes, [0] * 5))
    dumps(res)
    rp = res["reproducibility"]
    assert rp["agreement"]["estimate"] == 1.0  # they do all agree: that is a count, not a kappa
    for m in ("fleiss_kappa", "conger_kappa", "light_kappa", "krippendorff_alpha"):
        assert rp[m]["estimate"] is None, m
    assert res["repeatability"]["R1"]["fleiss_kappa"]["estimate"] is None
    assert res["accuracy"]["R1"]["cohen_kappa"]["estimate"] is None
    measures = {w["measure"] for w in res["warnings"]}
    assert "reproducibility.fleiss_kappa" in measures
    assert "design" in measures  # every rating in one category
    # no defect item: the miss rate cannot be estimated, and says so
    assert res["accuracy"]["R1"]["miss_rate"]["estimate"] is None
    assert "accuracy.R1.miss_rate" in measures


def test_single_item() -> None:
    study = make_study(bootstrap_resamples=200)
    codes = np.array([[[0, 1], [0, 0]]])
    res = analyse(study, make_ratings(study, codes, [0]))
    dumps(res)
    assert res["design"]["items"] == 1
    assert any("single item" in w["message"] for w in res["warnings"])
    assert res["bootstrap"]["measures"] == []


def test_one_rater_one_trial_no_reference() -> None:
    study = make_study(raters=("R1",), trials=1)
    codes = np.array([[[0]], [[1]], [[0]]])
    res = analyse(study, make_ratings(study, codes))
    dumps(res)
    for absent in ("repeatability", "accuracy", "reproducibility", "panel_accuracy"):
        assert absent not in res
    measures = {w["measure"] for w in res["warnings"]}
    assert {"repeatability", "reproducibility"} <= measures
    assert any(n["measure"] == "accuracy" for n in res["notes"])
    assert res["items"][0]["agreement"] is None  # one rating: no pairs
    assert res["hard_items"] == []


def test_missing_ratings_are_left_out() -> None:
    study = make_study(missing="allow")
    codes = CODES_A.copy()
    codes[1, 0, 1] = -1  # R1's second look at I2 (the G that disagreed) is missing
    res = analyse(study, make_ratings(study, codes, REF_A))
    dumps(res)
    assert res["design"]["missing"] == 1 and res["design"]["ratings"] == 15
    # R1 now rated I2 once: 3 items with two trials, all consistent
    assert (
        res["repeatability"]["R1"]["agreement"]["agreeing"],
        res["repeatability"]["R1"]["agreement"]["items"],
    ) == (3, 3)
    assert res["accuracy"]["R1"]["effectiveness"]["items"] == 7
    assert res["caveats"]["missing"]["by_rater"] == {"R1": 1, "R2": 0}
    assert res["caveats"]["missing"]["items_with_missing"] == 1
    items = {it["id"]: it for it in res["items"]}
    assert items["I2"]["ratings"] == 3 and items["I2"]["counts"] == {"G": 2, "D": 1}


def test_inconsistent_inputs_refused() -> None:
    study = make_study()
    bad = Ratings(
        items=("I1",),
        raters=("R1", "R2"),
        categories=("G", "X"),
        codes=np.zeros((1, 2, 2), np.int8),
    )
    with pytest.raises(ValueError, match="categories"):
        analyse(study, bad)
    bad = make_ratings(study, np.full((1, 2, 2), 5))
    with pytest.raises(ValueError, match="outside"):
        analyse(study, bad)


# ---------------------------------------------------------------------------------------------
# bootstrap, progress, JSON
# ---------------------------------------------------------------------------------------------


def random_study(
    n: int, r: int, t: int, k: int, *, seed: int, resamples: int, scale: str = "ordinal"
) -> tuple[Study, Ratings]:
    rng = np.random.default_rng(seed)
    codes = tuple("ABCDEFGH"[:k])
    study = make_study(
        scale=scale,
        codes=codes,
        raters=tuple(f"R{i + 1}" for i in range(r)),
        trials=t,
        defect=codes[-1],
        bootstrap_resamples=resamples,
        bootstrap_seed=7,
    )
    truth = rng.integers(0, k, size=n)
    noise = rng.integers(-1, 2, size=(n, r, t)) * (rng.random((n, r, t)) < 0.3)
    ratings = np.clip(truth[:, None, None] + noise, 0, k - 1)
    return study, make_ratings(study, ratings, truth.tolist())


def test_bootstrap_intervals_recorded_and_reproducible() -> None:
    study, ratings = random_study(40, 3, 2, 3, seed=3, resamples=300)
    a = analyse(study, ratings)
    b = analyse(study, ratings)
    assert a == b  # same seed, same intervals
    boot = a["bootstrap"]
    assert boot["resamples"] == 300 and boot["seed"] == 7
    assert "reproducibility.fleiss_kappa" in boot["measures"]
    assert "reproducibility.conger_kappa" in boot["measures"]
    fk = a["reproducibility"]["fleiss_kappa"]
    assert fk["ci_method"].startswith("bootstrap")
    assert fk["ci_low"] < fk["estimate"] < fk["ci_high"]
    # p-value still from the published null test, not from the bootstrap
    assert fk["p_value"] is not None
    # Conger and Light have no analytic interval; the bootstrap gives one
    assert a["reproducibility"]["light_kappa"]["ci_low"] is not None
    # proportions keep their exact interval
    assert a["reproducibility"]["agreement"]["ci_method"].startswith("exact")
    dumps(a)


def test_analytic_when_no_resamples() -> None:
    study, ratings = random_study(30, 3, 2, 3, seed=4, resamples=0)
    res = analyse(study, ratings)
    assert res["bootstrap"]["measures"] == [] and res["bootstrap"]["ci_method"] == "analytic"
    assert "Gwet" in res["reproducibility"]["fleiss_kappa"]["ci_method"]


def test_progress_called() -> None:
    study, ratings = random_study(10, 2, 2, 3, seed=5, resamples=50)
    seen: list[str] = []
    analyse(study, ratings, progress=seen.append)
    assert any("bootstrap" in s for s in seen) and "repeatability" in seen


def test_typical_study_speed() -> None:
    """50 items × 3 raters × 3 trials, every measure with 2,000 bootstrap resamples.

    The target is 20 ms of compute on an idle development machine; this check only catches a
    gross regression (an order of magnitude), since shared CI machines are noisy.
    """
    study, ratings = random_study(50, 3, 3, 4, seed=6, resamples=2000)
    analyse(study, ratings)  # warm imports
    best = min(_timed(lambda: analyse(study, ratings)) for _ in range(5))
    assert best < 1.0, f"typical study took {best * 1000:.1f} ms"


def _timed(fn: Any) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


@pytest.mark.slow
def test_labelling_campaign_size() -> None:
    """100,000 items × 20 raters × 1 trial, 5 categories, 5 % missing: a few seconds, bounded memory."""
    rng = np.random.default_rng(1)
    n, r, k = 100_000, 20, 5
    truth = rng.integers(0, k, n)
    noise = rng.integers(-1, 2, size=(n, r, 1)) * (rng.random((n, r, 1)) < 0.3)
    codes = np.clip(truth[:, None, None] + noise, 0, k - 1)
    codes[rng.random((n, r, 1)) < 0.05] = -1
    study = make_study(
        scale="ordinal",
        codes=tuple("ABCDE"),
        raters=tuple(f"R{i}" for i in range(r)),
        trials=1,
        defect="E",
        bootstrap_resamples=2000,
        missing="allow",
    )
    ratings = make_ratings(study, codes, truth.tolist())
    t0 = time.perf_counter()
    res = analyse(study, ratings)
    elapsed = time.perf_counter() - t0
    assert elapsed < 30, f"{elapsed:.1f} s"
    assert "reproducibility.fleiss_kappa" in res["bootstrap"]["measures"]
    # too large for the rater-identified bootstrap: said in words, not silently dropped
    assert any(w["measure"] == "reproducibility.light_kappa" for w in res["warnings"])
    assert len(res["items"]) == n and len(res["hard_items"]) == 25
    dumps(res)


# ---------------------------------------------------------------------------------------------
# invariances and the small counting helpers
# ---------------------------------------------------------------------------------------------


def test_rater_and_item_order_do_not_matter() -> None:
    study, ratings = random_study(30, 3, 2, 3, seed=8, resamples=0)
    base = analyse(study, ratings)
    perm_r = [2, 0, 1]
    perm_i = np.random.default_rng(0).permutation(30)
    study2 = make_study(
        scale="ordinal",
        codes=study.category_codes,
        raters=tuple(study.rater_ids[j] for j in perm_r),
        trials=2,
        defect=study.defect_category,
        bootstrap_resamples=0,
    )
    ratings2 = Ratings(
        items=tuple(ratings.items[i] for i in perm_i),
        raters=study2.rater_ids,
        categories=ratings.categories,
        codes=ratings.codes[perm_i][:, perm_r, :],
        reference=None if ratings.reference is None else ratings.reference[perm_i],
    )
    other = analyse(study2, ratings2)
    for m in (
        "agreement",
        "fleiss_kappa",
        "krippendorff_alpha",
        "gwet_ac2",
        "conger_kappa",
        "light_kappa",
    ):
        assert other["reproducibility"][m]["estimate"] == pytest.approx(
            base["reproducibility"][m]["estimate"], abs=1e-12
        ), m
    for rid in study.rater_ids:
        for m in ("agreement", "effectiveness", "cohen_kappa", "weighted_kappa"):
            assert other["accuracy"][rid][m]["estimate"] == pytest.approx(
                base["accuracy"][rid][m]["estimate"], abs=1e-12
            )
        assert other["repeatability"][rid]["agreement"] == base["repeatability"][rid]["agreement"]
    assert sorted(other["hard_items"]) == sorted(base["hard_items"])


def test_perfect_agreement_gives_one_with_variation() -> None:
    study = make_study(bootstrap_resamples=0)
    codes = np.array([[[0, 0], [0, 0]], [[1, 1], [1, 1]], [[0, 0], [0, 0]], [[1, 1], [1, 1]]])
    res = analyse(study, make_ratings(study, codes, [0, 1, 0, 1]))
    rp = res["reproducibility"]
    for m in ("fleiss_kappa", "krippendorff_alpha", "gwet_ac1", "conger_kappa", "light_kappa"):
        assert rp[m]["estimate"] == pytest.approx(1.0, abs=1e-12), m
    assert res["panel_accuracy"]["miss_rate"]["estimate"] == 0.0
    assert res["hard_items"] == []


def test_pair_distance_and_offset_helpers() -> None:
    from reportgen.stats.ordinal import pair_distance_counts, signed_offset_counts

    # one item rated A, A, C: pairs (A,A) 0 steps, (A,C) twice 2 steps
    assert pair_distance_counts(np.array([[2, 0, 1]])).tolist() == [1, 0, 2]
    # offsets of (B, C, A, -) against (A, A, C, B): +1, +2, -2 (missing pair left out)
    out = signed_offset_counts(np.array([1, 2, 0, -1]), np.array([0, 0, 2, 1]), 3)
    assert out.tolist() == [1, 0, 0, 1, 1]


def test_items_needed_scaling() -> None:
    from reportgen.stats.caveats import half_width, items_needed

    assert half_width(0.5, 0.9) == pytest.approx(0.2)
    assert half_width(None, 0.9) is None
    # half-width 0.2 from 50 items; ±0.10 needs 50 · (0.2/0.1)² = 200 items
    assert items_needed(0.2, 50, 0.10) == 200
    assert items_needed(0.05, 50, 0.10) == 13  # ceil(12.5)
    assert items_needed(None, 50, 0.10) is None
    with pytest.raises(ValueError):
        items_needed(0.2, 50, 0.0)


def test_json_cleaning_turns_numpy_and_nan_into_plain_values() -> None:
    from reportgen.analysis import _Collector, _jsonable

    col = _Collector()
    out = _jsonable(
        {
            "a": np.float64(0.5),
            "b": np.int8(3),
            "c": [np.bool_(True), float("nan")],
            "d": np.arange(2),
        },
        col,
    )
    assert out == {"a": 0.5, "b": 3, "c": [True, None], "d": [0, 1]}
    assert type(out["b"]) is int and type(out["c"][0]) is bool
    # a non-finite figure is never silent: it is named in the warnings
    assert col.warnings == [
        {"measure": "c", "message": "A figure was not a finite number and is shown as undefined."}
    ]
    json.dumps(out, allow_nan=False)


# ---------------------------------------------------------------------------------------------
# named agreement shares, category names in warnings, interval range, degenerate units
# ---------------------------------------------------------------------------------------------


def test_exact_and_within_one_agreement_records(design_b: dict[str, Any]) -> None:
    """Design B by hand: R1 (A C C vs A B C) 2 of 3 exact, 3 of 3 within one step; R2 (B B B)
    1 of 3 exact, 3 of 3 within one; panel 3 of 6 exact, 6 of 6 within one."""
    acc = design_b["accuracy"]
    r1, r2 = acc["R1"], acc["R2"]
    assert set(r1["exact_agreement"]) == M_KEYS
    assert (r1["exact_agreement"]["agreeing"], r1["exact_agreement"]["items"]) == (2, 3)
    assert (r2["exact_agreement"]["agreeing"], r2["exact_agreement"]["items"]) == (1, 3)
    assert (r1["within_one_agreement"]["agreeing"], r1["within_one_agreement"]["items"]) == (3, 3)
    assert r1["within_one_agreement"]["estimate"] == 1.0
    # the same records as the ordinal block (same counts, same interval)
    od = design_b["ordinal"]["accuracy"]
    assert r1["exact_agreement"] == od["R1"]["exact"]
    assert r2["within_one_agreement"] == od["R2"]["within_one_step"]
    pa = design_b["panel_accuracy"]
    assert (pa["exact_agreement"]["agreeing"], pa["exact_agreement"]["items"]) == (3, 6)
    assert (pa["within_one_agreement"]["agreeing"], pa["within_one_agreement"]["items"]) == (6, 6)
    assert pa["exact_agreement"] == design_b["ordinal"]["panel_accuracy"]["exact"]
    assert "accuracy.exact_agreement" in design_b["conventions"]


def test_exact_agreement_absent_on_nominal_scales(design_a: dict[str, Any]) -> None:
    for entry in design_a["accuracy"].values():
        assert "exact_agreement" not in entry and "within_one_agreement" not in entry
    assert "exact_agreement" not in design_a["panel_accuracy"]


def test_fleiss_category_warnings_name_the_code() -> None:
    # category "D" is declared but never used: its per-category kappa is undefined
    study = make_study(scale="nominal", codes=("A", "B", "C", "D"), defect=None, trials=1)
    codes = np.array([[[0], [0]], [[1], [1]], [[2], [1]], [[0], [2]], [[1], [1]]])
    res = analyse(study, make_ratings(study, codes))
    assert res["reproducibility"]["fleiss_kappa_by_category"]["D"]["estimate"] is None
    msgs = [
        w["message"]
        for w in res["warnings"]
        if w["measure"] == "reproducibility.fleiss_kappa_by_category.D"
    ]
    assert any("category D" in m for m in msgs), msgs
    assert not any("category 3" in m for m in msgs)


def test_analytic_repeatability_interval_stays_within_range() -> None:
    """No resamples: the repeatability Fleiss interval is Gwet's analytic one, cut to -1 .. 1
    with a warning when it overshoots (it reached 1.0098 before)."""
    study = make_study(bootstrap_resamples=0, raters=("R1",), trials=3)
    # six items, three trials each: near-perfect repeatability on few items
    codes = np.array([[[0, 0, 0]], [[0, 0, 0]], [[1, 1, 1]], [[1, 1, 1]], [[0, 0, 1]], [[0, 0, 0]]])
    res = analyse(study, make_ratings(study, codes, [0, 0, 1, 1, 0, 0]))
    fk = res["repeatability"]["R1"]["fleiss_kappa"]
    assert fk["ci_method"] == "analytic (Gwet)"
    assert -1.0 <= fk["ci_low"] <= fk["estimate"] <= fk["ci_high"] == 1.0
    assert any(
        w["measure"] == "repeatability.R1.fleiss_kappa" and "cut to the range" in w["message"]
        for w in res["warnings"]
    )


def test_no_unit_with_two_ratings_gives_worded_undefined_conger() -> None:
    """Each rater rated in a different trial: no item × trial unit has two ratings."""
    study = make_study(bootstrap_resamples=200, missing="allow")
    codes = np.array(
        [[[0, -1], [-1, 0]], [[1, -1], [-1, 1]], [[0, -1], [-1, 1]], [[1, -1], [-1, 0]]]
    )
    res = analyse(study, make_ratings(study, codes, [0, 1, 0, 1]))
    cg = res["reproducibility"]["conger_kappa"]
    assert cg["estimate"] is None
    assert any(
        w["measure"] == "reproducibility.conger_kappa" and "undefined" in w["message"]
        for w in res["warnings"]
    )
    dumps(res)


# ---------------------------------------------------------------------------------------------
# the shared bootstrap and the count patterns
# ---------------------------------------------------------------------------------------------


def test_compressed_study_matches_the_core_on_full_tables() -> None:
    """Above 512 items the count table is compressed into patterns once; every count-table
    coefficient must equal the core's value on the full items × categories table (1e-12)."""
    from reportgen.stats.fleiss import fleiss_kappa
    from reportgen.stats.gwet import brennan_prediger, gwet_ac
    from reportgen.stats.krippendorff import krippendorff_alpha
    from reportgen.stats.tables import count_table

    study, ratings = random_study(900, 4, 2, 4, seed=21, resamples=0)
    res = analyse(study, ratings)
    table = count_table(np.asarray(ratings.codes).reshape(900, -1), 4)
    rp = res["reproducibility"]
    fl = fleiss_kappa(table)
    assert rp["fleiss_kappa"]["estimate"] == pytest.approx(fl.overall.estimate, abs=1e-12)
    assert rp["fleiss_kappa"]["se"] == pytest.approx(fl.overall.se, abs=1e-12)
    for j, code in enumerate(study.category_codes):
        assert rp["fleiss_kappa_by_category"][code]["estimate"] == pytest.approx(
            fl.by_category[j].estimate, abs=1e-12
        )
    assert rp["krippendorff_alpha"]["estimate"] == pytest.approx(
        krippendorff_alpha(table, level="ordinal").estimate, abs=1e-12
    )
    assert rp["gwet_ac1"]["estimate"] == pytest.approx(gwet_ac(table).estimate, abs=1e-12)
    assert rp["brennan_prediger"]["estimate"] == pytest.approx(
        brennan_prediger(table).estimate, abs=1e-12
    )
    assert res["reproducibility"]["agreement"]["agreeing"] == int(
        ((table.max(axis=1) == table.sum(axis=1)) & (table.sum(axis=1) >= 2)).sum()
    )


def test_every_family_is_bootstrapped_on_one_resample() -> None:
    study, ratings = random_study(50, 3, 3, 4, seed=6, resamples=400)
    res = analyse(study, ratings)
    measures = set(res["bootstrap"]["measures"])
    for path in (
        "reproducibility.fleiss_kappa",
        "reproducibility.fleiss_kappa_by_category.A",
        "reproducibility.krippendorff_alpha",
        "reproducibility.gwet_ac2",
        "reproducibility.conger_kappa",
        "reproducibility.light_kappa",
        "repeatability.R2.fleiss_kappa",
        "accuracy.R3.cohen_kappa",
        "accuracy.R3.weighted_kappa",
    ):
        assert path in measures, path
    assert res == analyse(study, ratings)  # reproducible under the study's seed


def test_rater_identified_bootstrap_dropped_in_words_when_too_large(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    import reportgen.analysis as analysis

    monkeypatch.setattr(analysis, "BOOT_WORK_LIMIT", 1)
    study, ratings = random_study(40, 3, 2, 3, seed=3, resamples=300)
    res = analyse(study, ratings)
    measures = res["bootstrap"]["measures"]
    assert "reproducibility.fleiss_kappa" in measures  # the count patterns always fit
    for path in (
        "reproducibility.conger_kappa",
        "reproducibility.light_kappa",
        "accuracy.R1.cohen_kappa",
        "repeatability.R1.fleiss_kappa",
    ):
        assert path not in measures
        assert any(w["measure"] == path and "too large" in w["message"] for w in res["warnings"]), (
            path
        )
    assert res["reproducibility"]["light_kappa"]["ci_low"] is None  # none published
    # the per-rater kappa keeps its analytic interval (and the warning says it is too narrow)
    ck = res["accuracy"]["R1"]["cohen_kappa"]
    assert ck["ci_method"] == "analytic (Fleiss-Cohen-Everitt 1969)" and ck["ci_low"] is not None


@pytest.mark.slow
def test_labelling_campaign_memory() -> None:
    """Transient memory of the count-table coefficients with their bootstrap at campaign size
    (100,000 items × 20 raters, 5 categories, 5 % missing) stays under 100 MB beyond the
    ratings; the whole analysis, with 100,000 item records kept, under 150 MB."""
    import tracemalloc

    from reportgen.stats.bootstrap import FeatureGroup, bootstrap_groups
    from reportgen.stats.fleiss import (
        fleiss_kappa,
        fleiss_kappa_by_category_from_sums,
        fleiss_kappa_features,
        fleiss_kappa_from_sums,
    )
    from reportgen.stats.gwet import gwet_ac, gwet_ac_features
    from reportgen.stats.krippendorff import krippendorff_alpha, krippendorff_alpha_features
    from reportgen.stats.tables import count_patterns

    rng = np.random.default_rng(1)
    n, r, k = 100_000, 20, 5
    truth = rng.integers(0, k, n)
    codes = np.where(rng.random((n, r)) < 0.8, truth[:, None], rng.integers(0, k, (n, r)))
    codes[rng.random((n, r)) < 0.05] = -1
    codes = codes.astype(np.int8)
    tracemalloc.start()
    try:
        base = tracemalloc.get_traced_memory()[0]
        pat = count_patterns(codes, k)
        fleiss_kappa(pat)
        for level in ("nominal", "ordinal", "interval"):
            krippendorff_alpha(pat, level=level)  # type: ignore[arg-type]
        gwet_ac(pat)
        gwet_ac(pat, weights="quadratic")
        f = np.concatenate(
            [
                fleiss_kappa_features(pat.rows),
                krippendorff_alpha_features(pat.rows),
                gwet_ac_features(pat.rows),
                gwet_ac_features(pat.rows, weights="quadratic"),
            ],
            axis=1,
        )
        stats = {"fleiss": ("c", lambda s: fleiss_kappa_from_sums(s[..., :13]))}
        for j in range(k):
            stats[f"c{j}"] = (
                "c",
                lambda s, j=j: fleiss_kappa_by_category_from_sums(s[..., :13])[..., j],
            )
        bootstrap_groups(
            {"c": FeatureGroup(f, pat.multiplicity, pat.inverse)}, stats, resamples=2000, seed=1
        )
        peak = tracemalloc.get_traced_memory()[1] - base
        assert peak < 100 * 2**20, f"{peak / 2**20:.0f} MB"
        study = make_study(
            scale="ordinal",
            codes=tuple("ABCDE"),
            raters=tuple(f"R{i}" for i in range(r)),
            trials=1,
            defect=None,
            bootstrap_resamples=2000,
            missing="allow",
        )
        ratings = make_ratings(study, codes[:, :, None])
        tracemalloc.reset_peak()
        base = tracemalloc.get_traced_memory()[0]
        analyse(study, ratings)
        peak = tracemalloc.get_traced_memory()[1] - base
        assert peak < 150 * 2**20, f"{peak / 2**20:.0f} MB"
    finally:
        tracemalloc.stop()
