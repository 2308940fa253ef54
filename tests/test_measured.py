"""Measured reference values: intake (measured_reference), the analyses in the results, the
two demo studies, and the seeded coverage check of a90/95 (MIL-HDBK-1823A, 2009)."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from reportgen.analysis import analyse
from reportgen.errors import InputError
from reportgen.ratings import load_ratings
from reportgen.study import load_study

ROOT = Path(__file__).resolve().parent.parent
STUDIES = ROOT / "studies"


def _copy(tmp_path: Path, folder: str) -> Path:
    dst = tmp_path / folder
    shutil.copytree(STUDIES / folder, dst)
    return dst / "study.yaml"


def _results(path: Path) -> dict:
    study = load_study(path)
    return analyse(study, load_ratings(study))


def _problems(path: Path) -> list[str]:
    with pytest.raises(InputError) as exc:
        _results(path)
    return [p.format() for p in exc.value.problems()]


def test_bore_demo_gives_curves_per_setter_and_limit() -> None:
    m = _results(STUDIES / "bore-plug-gauge" / "study.yaml")["measured"]
    assert m["unit"] == "mm" and m["tolerance"] == pytest.approx(0.018)
    assert sorted(m["gauge_curve"]) == ["SET-1", "SET-2"]
    for per in m["gauge_curve"].values():
        assert sorted(per) == ["lower", "upper"]
        for rec in per.values():
            a, p = rec["analytic"], rec["probit"]
            assert a["refused"] is None and p["refused"] is None
            # the two fits of the same counts agree on the 50 % point within a repeatability
            assert abs(a["value_at_50"] - p["value_at_50"]) < a["repeatability"] / 5
            assert p["bias"]["low"] < p["bias"]["estimate"] < p["bias"]["high"]
    # the simulated worn no-go side: every setter's upper-limit bias is positive
    assert all(per["upper"]["analytic"]["bias"] > 0 for per in m["gauge_curve"].values())
    assert set(m["zone"]) == {"lower", "upper"}
    for z in m["zone"].values():
        assert z["share_of_tolerance"] == pytest.approx(z["width"] / 0.018)


def test_pores_demo_gives_detection_figures_in_order() -> None:
    m = _results(STUDIES / "coating-pores" / "study.yaml")["measured"]
    det = m["detection"]
    assert sorted(det["by_rater"]) == ["V1", "V2", "V3"]
    for rec in [det["pooled"], *det["by_rater"].values()]:
        assert rec["refused"] is None
        assert rec["a50"] < rec["a90"] < rec["a90_95"]
        assert rec["size_axis"] == "log" and rec["bound_method"].startswith("likelihood ratio")
    # the inspector simulated to overlook small pores has the largest a90
    assert max(det["by_rater"], key=lambda r: det["by_rater"][r]["a90"]) == "V3"
    z = m["zone"]["upper"]
    assert z["accept_end"] < 100 < z["reject_end"] and z["share_of_tolerance"] is None
    assert any("a90/95" in line for line in m["readings"])


def test_many_trials_give_no_per_trial_warnings() -> None:
    r = _results(STUDIES / "bore-plug-gauge" / "study.yaml")
    per_trial = [w for w in r["warnings"] if w["measure"].startswith("reproducibility.by_trial.")]
    assert per_trial == []
    assert len(r["warnings"]) <= 1


def test_results_are_json_and_stable() -> None:
    a = json.dumps(
        _results(STUDIES / "coating-pores" / "study.yaml"), sort_keys=True, allow_nan=False
    )
    b = json.dumps(
        _results(STUDIES / "coating-pores" / "study.yaml"), sort_keys=True, allow_nan=False
    )
    assert a == b


def test_a_non_numeric_value_is_named_by_file_line_and_column(tmp_path: Path) -> None:
    path = _copy(tmp_path, "coating-pores")
    values = path.parent / "values.csv"
    lines = values.read_text().splitlines()
    item = lines[3].split(",")[0]
    lines[3] = f"{item},about 40"
    values.write_text("\n".join(lines) + "\n")
    probs = _problems(path)
    assert probs[0].startswith(f"{values}:4:2: error: value: 'about 40' is not a number")


def test_missing_unit_and_a_limit_outside_the_values_are_refused(tmp_path: Path) -> None:
    path = _copy(tmp_path, "coating-pores")
    text = (
        path.read_text().replace("  unit: um\n", "").replace("upper_limit: 100", "upper_limit: 900")
    )
    path.write_text(text)
    probs = "\n".join(_problems(path))
    assert "measured_reference.unit: the unit of the values is missing" in probs
    path.write_text(
        path.read_text().replace("  file: values.csv\n", "  file: values.csv\n  unit: um\n")
    )
    probs = "\n".join(_problems(path))
    assert (
        "measured_reference.upper_limit: the limit 900 is outside the range of the values" in probs
    )
    assert f"{path}:" in probs  # located in the study definition


def test_values_without_ratings_and_ratings_without_values(tmp_path: Path) -> None:
    path = _copy(tmp_path, "bore-plug-gauge")
    values = path.parent / "values.csv"
    text = values.read_text()
    values.write_text(text + "HB999,12.0100\n")
    probs = _problems(path)
    n = len(text.splitlines()) + 1
    assert any(
        p.startswith(f"{values}:{n}:1: error: item: item 'HB999' has a value but no ratings")
        for p in probs
    )
    lines = text.splitlines()
    gone = lines[1].split(",")[0]
    values.write_text("\n".join([lines[0], *lines[2:]]) + "\n")
    assert any(f"item {gone!r} has ratings but no value" in p for p in _problems(path))


def test_unknown_keys_and_analyses_are_refused(tmp_path: Path) -> None:
    path = _copy(tmp_path, "bore-plug-gauge")
    path.write_text(
        path.read_text().replace(
            "analyses: [gauge_curve, zone]", "analyses: [gauge_curve, zones]\n  colour: red"
        )
    )
    probs = "\n".join(_problems(path))
    assert "measured_reference.analyses.1: unknown analysis 'zones'" in probs
    assert "measured_reference.colour: unknown key 'colour'" in probs


def test_build_refuses_bad_values_with_exit_2_and_writes_nothing(tmp_path: Path, run_cli) -> None:
    path = _copy(tmp_path, "bore-plug-gauge")
    values = path.parent / "values.csv"
    values.write_text(values.read_text().replace("12.0045", "12.0O45", 1))
    out = tmp_path / "out"
    code, _out, err = run_cli("build", path, "-o", out, "--no-pdf")
    assert code == 2
    assert "values.csv:" in err and "is not a number" in err
    assert not any(out.rglob("*.html")) and not any(out.rglob("results.json"))


@pytest.mark.slow
def test_a90_95_covers_the_true_a90_in_at_least_93_percent_of_500_runs() -> None:
    """Seeded simulation with a known logit curve on log size: 20 sizes x 20 looks; the
    likelihood-ratio a90/95 must lie above the true a90 in >= 93 % of 500 runs (its nominal
    one-sided coverage is 95 %, MIL-HDBK-1823A 2009)."""
    from reportgen.stats.pod import detection

    rng = np.random.default_rng(16016)
    sizes = np.exp(np.linspace(np.log(20), np.log(400), 20))
    b0, b1 = -25.0, 5.5
    true_a90 = float(np.exp((np.log(9.0) - b0) / b1))
    n = np.full(20, 20)
    covered = refused = 0
    for _ in range(500):
        p = 1 / (1 + np.exp(-(b0 + b1 * np.log(sizes))))
        k = rng.binomial(n, p)
        rec = detection(sizes, k, n, log_size=True)
        if rec["a90_95"] is None:
            refused += 1
            continue
        covered += rec["a90_95"] >= true_a90
    rate = covered / (500 - refused)
    print(f"a90/95 coverage: {covered}/{500 - refused} = {rate:.3f} ({refused} refused)")  # noqa: T201
    assert refused == 0
    assert rate >= 0.93
