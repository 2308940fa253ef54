"""The demo studies in studies/: each loads, checks, analyses and gets its intended verdict.

The scenarios and their data are invented for reportgen (studies/simulate.py).  The intended
outcomes (issue 4, "Must show"): one study passes, one must improve, and one's verdict turns on
the interval — its point estimate meets the pass level, its lower bound does not.
"""

from __future__ import annotations

import importlib.util
import json
import sys
from pathlib import Path
from typing import Any

import pytest

from reportgen.analysis import analyse
from reportgen.ratings import load_ratings
from reportgen.study import load_study

ROOT = Path(__file__).resolve().parents[1]
STUDIES = ROOT / "studies"
STUDY_FILES = sorted(STUDIES.glob("*/study.yaml"))
HAS_VERDICT = importlib.util.find_spec("reportgen.verdict") is not None

#: folder -> (id, scale, items, raters, trials, has reference, intended verdict)
EXPECTED: dict[str, tuple[str, str, int, int, int, bool, str]] = {
    "finish-grading": ("FINISH-GRADE-DEMO", "ordinal", 48, 4, 2, True, "PASS"),
    "seal-check": ("SEAL-CHECK-DEMO", "binary", 50, 3, 3, True, "IMPROVE"),
    "defect-triage": ("RETURNS-TRIAGE-DEMO", "nominal", 64, 5, 1, False, "IMPROVE"),
    "bore-plug-gauge": ("BORE-PLUG-GAUGE-DEMO", "binary", 16, 2, 20, True, "IMPROVE"),
    "coating-pores": ("COATING-PORES-DEMO", "binary", 36, 3, 6, True, "IMPROVE"),
}


def _simulate_module() -> Any:
    spec = importlib.util.spec_from_file_location("demo_simulate", STUDIES / "simulate.py")
    assert spec is not None and spec.loader is not None
    mod = importlib.util.module_from_spec(spec)
    sys.modules["demo_simulate"] = mod
    spec.loader.exec_module(mod)
    return mod


def _judged(folder: str) -> tuple[Any, dict[str, Any], dict[str, Any]]:
    """The study, its results and the verdict helper's output for them."""
    from reportgen.verdict import judge

    study = load_study(STUDIES / folder / "study.yaml")
    results = analyse(study, load_ratings(study))
    return study, results, judge(study, results)


def test_every_demo_study_is_expected() -> None:
    assert sorted(p.parent.name for p in STUDY_FILES) == sorted(EXPECTED)


def test_simulation_regenerates_every_csv_byte_for_byte() -> None:
    files = _simulate_module().generate()
    # ratings + items for three studies, reference for two; ratings, reference, values and
    # items for the two measured-reference studies
    assert len(files) == 16
    for path, text in files.items():
        assert path.read_bytes() == text.encode("utf-8"), (
            f"{path} differs from what simulate.py makes"
        )


@pytest.mark.parametrize("folder", sorted(EXPECTED))
def test_demo_study_loads_checks_and_analyses(folder: str) -> None:
    sid, scale, n_items, n_raters, n_trials, has_ref, _ = EXPECTED[folder]
    study = load_study(STUDIES / folder / "study.yaml")
    assert (study.id, study.scale, study.trials, len(study.raters)) == (
        sid,
        scale,
        n_trials,
        n_raters,
    )
    ratings = load_ratings(study)
    assert (ratings.n_items, ratings.n_raters, ratings.n_trials) == (n_items, n_raters, n_trials)
    assert ratings.has_reference is has_ref
    results = analyse(study, ratings)
    assert results["schema"] == "reportgen-results/1"
    assert results["design"]["items"] == n_items
    assert json.loads(json.dumps(results, allow_nan=False)) == results  # JSON-ready, no NaN
    fk = results["reproducibility"]["fleiss_kappa"]
    assert fk["ci_low"] < fk["estimate"] < fk["ci_high"]
    if has_ref:
        assert set(results["accuracy"]) == set(study.rater_ids)
    else:
        assert "accuracy" not in results
    if n_trials >= 2:
        assert set(results["repeatability"]) == set(study.rater_ids)
    else:
        assert "repeatability" not in results


def test_missing_ratings_of_the_triage_study_are_allowed_and_counted() -> None:
    study = load_study(STUDIES / "defect-triage" / "study.yaml")
    assert study.missing == "allow"
    ratings = load_ratings(study)
    assert int((ratings.codes < 0).sum()) == _simulate_module().TRIAGE.n_missing == 5


@pytest.mark.skipif(
    importlib.util.find_spec("reportgen.commands.check") is None,
    reason="check command not there yet",
)
@pytest.mark.parametrize("folder", sorted(EXPECTED))
def test_check_command_passes_on_demo_study(folder: str) -> None:
    from click.testing import CliRunner

    from reportgen.cli import cli

    res = CliRunner().invoke(cli, ["check", str(STUDIES / folder / "study.yaml")])
    assert res.exit_code == 0, res.output
    assert "error" not in res.output.lower()


def test_demo_studies_use_the_optional_blocks() -> None:
    studies = {p.parent.name: load_study(p) for p in STUDY_FILES}
    assert [f for f, s in studies.items() if s.safety_related] == ["seal-check"]
    assert studies["seal-check"].certification is not None
    assert all(s.criteria is not None for s in studies.values())
    assert all(s.signoff.prepared_by and s.signoff.reviewed_by for s in studies.values())
    assert all(isinstance(s.plan, dict) and "seed" in s.plan for s in studies.values())


def test_seal_check_has_a_stricter_and_a_more_lenient_rater() -> None:
    study = load_study(STUDIES / "seal-check" / "study.yaml")
    acc = analyse(study, load_ratings(study))["accuracy"]
    fa = {r: acc[r]["false_alarm_rate"]["estimate"] for r in acc}
    miss = {r: acc[r]["miss_rate"]["estimate"] for r in acc}
    assert max(fa, key=fa.__getitem__) == "INS-B"  # stricter: rejects good seals
    assert max(miss, key=miss.__getitem__) == "INS-C"  # more lenient: passes weak seals
    assert fa["INS-B"] > 2 * fa["INS-A"] and miss["INS-C"] > 3 * miss["INS-A"]


@pytest.mark.skipif(not HAS_VERDICT, reason="verdict module not there yet")
@pytest.mark.parametrize("folder", sorted(EXPECTED))
def test_demo_study_gets_its_intended_verdict(folder: str) -> None:
    from reportgen.verdict import validate_criteria

    study, results, judged = _judged(folder)
    assert validate_criteria(study, results) == []
    assert judged["verdict"]["outcome"] == EXPECTED[folder][6]


@pytest.mark.skipif(not HAS_VERDICT, reason="verdict module not there yet")
def test_one_verdict_turns_on_the_interval() -> None:
    _, _, judged = _judged("defect-triage")
    (rule,) = judged["verdict"]["rules"]
    assert rule["measure"] == "reproducibility.fleiss_kappa" and rule["judge"] == "lower_bound"
    assert (
        rule["estimate"] >= rule["pass"] > rule["ci_low"]
    )  # the estimate meets, the bound does not
    assert rule["outcome"] == "marginal"


@pytest.mark.skipif(not HAS_VERDICT, reason="verdict module not there yet")
def test_passing_study_clears_every_level_with_room() -> None:
    _, _, judged = _judged("finish-grading")
    for rule in judged["verdict"]["rules"]:
        assert rule["outcome"] == "meets"
        assert rule["margin"] > 0.01, rule  # not a knife-edge pass


@pytest.mark.skipif(not HAS_VERDICT, reason="verdict module not there yet")
def test_seal_check_certifies_no_inspector_a_criterion_rates_short() -> None:
    # issue 12: INS-A's 5.3 % miss rate is short of the study's own 2 % criterion, so the
    # certificate it used to get (under a looser 6 % certification rule) is withheld
    _, _, judged = _judged("seal-check")
    outcome = {i["rater"]: i["outcome"] for i in judged["certification"]["inspectors"]}
    assert outcome == {
        "INS-A": "not certified",
        "INS-B": "not certified",
        "INS-C": "not certified",
    }
    short = {c["rater"] for c in judged["verdict"]["rules"] if c["outcome"] != "meets"}
    assert short == {"INS-A", "INS-B", "INS-C"}


@pytest.fixture(scope="module")
def demo_run(demo_run_once: Any) -> tuple[Path, Any]:
    """The one run of `reportgen demo` of the test session (tests/conftest.py), shared with
    the render tests: building every report takes a while."""
    return demo_run_once.out, demo_run_once.result


@pytest.mark.slow
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_demo_command_runs_every_study(demo_run: tuple[Path, Any]) -> None:
    out, res = demo_run
    assert res.exit_code == 0, res.output
    for sid, *_rest, verdict in EXPECTED.values():
        assert (out / sid).is_dir() and any((out / sid).rglob("*"))
        line = next(x for x in res.output.splitlines() if x.startswith(f"{sid}:"))
        if HAS_VERDICT:
            assert line.endswith(f"-> {verdict}")


@pytest.mark.slow
def test_demo_on_a_fresh_folder_builds_final_reports(demo_run: tuple[Path, Any]) -> None:
    out, res = demo_run
    assert res.exit_code == 0, res.output
    assert "DRAFT" not in res.output
    for sid, *_rest in EXPECTED.values():
        html = (out / sid / "rev1" / f"{sid}-rev1.html").read_text(encoding="utf-8")
        assert '<body class="draft"' not in html and "DRAFT" not in html, sid


@pytest.mark.slow
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_demo_twice_rebuilds_an_existing_revision_as_a_draft(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """`make demo` twice in a row: the second run rebuilds as drafts and says so per study.
    (On a small invented study, so that it takes seconds: tests/_built.py.)"""
    from _built import study_files
    from click.testing import CliRunner

    from reportgen.cli import cli

    study_files(tmp_path / "studies" / "lugs")
    out = tmp_path / "output"
    args = ["demo", "--output", str(out), "--studies", str(tmp_path / "studies")]
    runner = CliRunner(env={"CI": None})
    first = runner.invoke(cli, args)
    assert first.exit_code == 0, first.output
    line = next(x for x in first.output.splitlines() if x.startswith("LUG-CHECK:"))
    assert line.endswith("-> PASS") or line.endswith("-> IMPROVE")
    html = out / "LUG-CHECK" / "rev1" / "LUG-CHECK-rev1.html"
    assert '<body class="draft"' not in html.read_text(encoding="utf-8")
    second = runner.invoke(cli, args)
    assert second.exit_code == 0, second.output
    line2 = next(x for x in second.output.splitlines() if x.startswith("LUG-CHECK:"))
    assert line2 == line + (
        " (DRAFT: revision 1 was built before, so it was rebuilt as a draft; raise "
        "study.revision or use a new --output folder for a final report)"
    )
    assert '<body class="draft"' in html.read_text(encoding="utf-8")
    assert sorted(p.name for p in (out / "LUG-CHECK").iterdir()) == ["rev1"]


def test_demo_command_quiet_prints_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from click.testing import CliRunner

    import reportgen.commands.demo as demo
    from reportgen.cli import cli

    seen: list[Path] = []

    def fake(path: Path, *, output: Path, quiet: bool = True) -> dict[str, Any]:
        seen.append(path)
        return {
            "study": path.parent.name,
            "items": 1,
            "raters": 1,
            "trials": 1,
            "verdict": None,
            "written": [],
        }

    monkeypatch.setattr(demo, "run_demo_study", fake)
    res = CliRunner().invoke(cli, ["demo", "--quiet", "--output", str(tmp_path)])
    assert res.exit_code == 0, res.output
    assert res.output == ""
    assert seen == STUDY_FILES  # the repository's studies/ folder, every study, in order


def test_demo_command_without_studies_is_an_input_error(tmp_path: Path) -> None:
    from click.testing import CliRunner

    from reportgen.cli import cli
    from reportgen.errors import InputError

    res = CliRunner().invoke(
        cli, ["demo", "--studies", str(tmp_path), "--output", str(tmp_path / "o")]
    )
    assert isinstance(res.exception, InputError)
    assert "no demo study found" in str(res.exception)
