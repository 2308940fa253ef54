"""``reportgen check``: design printout, JSON, warnings, --strict, exit codes, nothing written."""

from __future__ import annotations

import importlib.machinery
import json
import subprocess
import sys
import types
from pathlib import Path
from typing import Any

import pytest
from conftest import DEFAULT_CATEGORIES, default_ratings, default_reference

from reportgen.design import MIN_ITEMS, design_summary, design_warnings
from reportgen.errors import Location, Problem
from reportgen.ratings import load_ratings
from reportgen.study import load_study


def listing(folder: Path) -> list[tuple[str, int]]:
    return sorted((str(p.relative_to(folder)), p.stat().st_mtime_ns) for p in folder.rglob("*"))


def test_check_prints_the_design(make_study, run_cli) -> None:
    path = make_study()
    before = listing(path.parent)
    code, out, err = run_cli("check", path)
    assert (code, err) == (0, "")
    assert "study TEST-01 (revision 1): Test study" in out
    assert "scale       ordinal, 3 categories: P Premium, S Standard, X Scrap" in out
    assert "items       30" in out
    assert "raters      3: R1, R2, R3" in out
    assert "trials      2" in out
    assert "ratings     180 of 180 expected (100.0 %; missing: refuse)" in out
    assert "R2               60 of 60" in out and "trial 2          90 of 90" in out
    assert "reference   30 of 30 items" in out
    assert "per category: P 10, S 10, X 10" in out
    assert "warnings    none" in out
    assert listing(path.parent) == before


def test_check_json_design(make_study, run_cli) -> None:
    rows = [
        r
        for r in default_ratings(
            default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
        )
        if not (r[1] == "R2" and r[2] == 2 and r[0] in ("I01", "I02", "I03"))
    ]
    path = make_study(missing="allow", ratings_rows=rows)
    code, out, err = run_cli("check", path, "--json")
    assert code == 0, err
    data = json.loads(out)
    assert data["ok"] is True and data["warnings"] == []
    d = data["design"]
    assert (d["items"], d["raters"], d["trials"], d["scale"]) == (
        30,
        ["R1", "R2", "R3"],
        2,
        "ordinal",
    )
    assert d["ratings"] == {"expected": 180, "present": 177}
    assert d["completeness"]["by_rater"]["R2"] == {"present": 57, "expected": 60}
    assert d["completeness"]["by_trial"]["2"] == {"present": 87, "expected": 90}
    assert d["reference"] == {
        "items": 30,
        "items_with_reference": 30,
        "counts": {"P": 10, "S": 10, "X": 10},
    }
    assert sum(d["rating_counts"].values()) == 177
    assert [s["role"] for s in d["sources"]] == ["ratings", "reference"]
    assert d["notes"] == ["3 of 180 ratings absent (missing: allow)"]


def test_bad_input_exits_2_with_message_on_stderr(
    make_study, run_cli, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = make_study(ratings_text="item,rater,trial,rating\nI01,R1,1,Q\n")
    monkeypatch.chdir(path.parent)
    before = listing(path.parent)
    code, out, err = run_cli("check", "study.yaml")
    assert code == 2 and out == ""
    assert "ratings.csv:2: error: rating: unknown category 'Q'" in err
    assert listing(path.parent) == before


def test_bad_input_json(make_study, run_cli, monkeypatch: pytest.MonkeyPatch) -> None:
    path = make_study(ratings_text="item,rater,trial,rating\nI01,R1,1,Q\n")
    monkeypatch.chdir(path.parent)
    code, out, err = run_cli("check", "study.yaml", "--json")
    assert code == 2
    data = json.loads(out)
    assert data["ok"] is False
    first = data["problems"][0]
    assert first == {
        "file": "ratings.csv",
        "line": 2,
        "column": None,
        "field": "rating",
        "severity": "error",
        "message": "unknown category 'Q'",
        "hint": "declared codes: P, S, X",
    }


def test_bad_definition_exit_2(make_study, run_cli, monkeypatch: pytest.MonkeyPatch) -> None:
    path = make_study(trails=3)
    monkeypatch.chdir(path.parent)
    code, out, err = run_cli("check", "study.yaml")
    assert code == 2
    assert (
        "study.yaml:" in err
        and "trails: unknown key 'trails'" in err
        and "did you mean 'trials'?" in err
    )


def test_missing_study_file_exit_2(run_cli, tmp_path: Path) -> None:
    code, _, err = run_cli("check", tmp_path / "none.yaml")
    assert code == 2 and "study definition not found" in err


def warnings_of(path: Path) -> list[dict[str, str]]:
    study = load_study(path)
    return design_warnings(study, load_ratings(study))


def test_warning_few_items(make_study) -> None:
    w = warnings_of(make_study(n_items=12))
    assert [x["kind"] for x in w] == ["few-items"]
    assert f"only 12 items; at least {MIN_ITEMS} is common practice" in w[0]["message"]


def test_warning_category_not_in_reference(make_study) -> None:
    ref = [(i, "P" if c == "X" else c) for i, c in default_reference(30, ["P", "S", "X"])]
    w = warnings_of(make_study(reference_rows=ref))
    assert [x["kind"] for x in w] == ["category-not-in-reference"]
    assert "category X (Scrap) is the reference of no item" in w[0]["message"]


def test_warning_single_category_rater(make_study) -> None:
    rows = [
        (i, r, t, "S" if r == "R2" else c)
        for i, r, t, c in default_ratings(
            default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
        )
    ]
    w = warnings_of(make_study(ratings_rows=rows))
    assert [x["kind"] for x in w] == ["single-category-rater"]
    assert "rater R2 gave every rating as S" in w[0]["message"]


def test_warning_single_trial(make_study) -> None:
    w = warnings_of(make_study(trials=1))
    assert [x["kind"] for x in w] == ["single-trial"]
    assert "repeatability" in w[0]["message"]


def test_strict_exits_4_on_warnings(make_study, run_cli) -> None:
    path = make_study(trials=1)
    code, out, err = run_cli("check", path, "--strict")
    assert code == 4
    assert "only 1 trial" in out and "1 warning(s) and --strict" in err
    code, out, _ = run_cli("check", path, "--strict", "--json")
    assert code == 4 and json.loads(out)["warnings"][0]["kind"] == "single-trial"
    assert run_cli("check", path)[0] == 0
    assert run_cli("check", make_study(Path(path).parent.parent / "clean"), "--strict")[0] == 0


def test_design_summary_counts(make_study) -> None:
    study = load_study(make_study(n_items=6, trials=1, reference=None))
    ratings = load_ratings(study)
    d = design_summary(study, ratings)
    assert d["reference"] is None and d["items"] == 6 and d["trials"] == 1
    # references P S X P S X, 3 raters: 6 of each; default_ratings moves rater r (0-based) on
    # item i to the next code when (i + 2r + 1) % 7 == 0: R2 on item 4 (S -> X), R3 on item 2 (X -> P)
    assert d["rating_counts"] == {"P": 7, "S": 5, "X": 6}


def _fake_layers(
    monkeypatch: pytest.MonkeyPatch, problems: list[Problem], seen: dict[str, Any]
) -> None:
    analysis = types.ModuleType("reportgen.analysis")
    verdict = types.ModuleType("reportgen.verdict")
    analysis.__spec__ = importlib.machinery.ModuleSpec("reportgen.analysis", None)
    verdict.__spec__ = importlib.machinery.ModuleSpec("reportgen.verdict", None)

    def analyse(study: Any, ratings: Any, *, progress: Any = None) -> dict[str, Any]:
        seen["analysed"] = ratings.n_items
        return {"schema": "reportgen-results/1"}

    def validate_criteria(study: Any, results: dict[str, Any]) -> list[Problem]:
        seen["criteria"] = study.criteria
        return problems

    analysis.analyse = analyse  # type: ignore[attr-defined]
    verdict.validate_criteria = validate_criteria  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "reportgen.analysis", analysis)
    monkeypatch.setitem(sys.modules, "reportgen.verdict", verdict)


def test_check_validates_criteria_through_the_verdict_layer(
    make_study, run_cli, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = make_study(criteria={"rules": [{"measure": "nothing.here", "pass": 0.9}]})
    study = load_study(path)
    loc = study.locate("criteria", "rules", 0, "measure")
    seen: dict[str, Any] = {}
    _fake_layers(monkeypatch, [Problem(loc, "unknown measure 'nothing.here'")], seen)
    code, _, err = run_cli("check", path)
    assert code == 2
    assert (
        f"study.yaml:{loc.line}:{loc.column}: error: criteria.rules[0].measure: unknown measure 'nothing.here'"
        in err
    )
    assert seen == {
        "analysed": 30,
        "criteria": {"rules": [{"measure": "nothing.here", "pass": 0.9}]},
    }


def test_check_validates_criteria_from_the_design_when_supported(
    make_study, run_cli, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = make_study(certification={"valid_months": "soon"}, reference=None)
    verdict = types.ModuleType("reportgen.verdict")
    verdict.__spec__ = importlib.machinery.ModuleSpec("reportgen.verdict", None)
    calls: list[tuple[Any, Any]] = []

    def validate_criteria(
        study: Any, results: Any = None, *, has_reference: bool | None = None
    ) -> list[Problem]:
        calls.append((results, has_reference))
        return [
            Problem(
                study.locate("certification", "valid_months"),
                "must be a whole number",
                severity="warning",
            )
        ]

    verdict.validate_criteria = validate_criteria  # type: ignore[attr-defined]
    monkeypatch.setitem(sys.modules, "reportgen.verdict", verdict)
    monkeypatch.setitem(sys.modules, "reportgen.analysis", None)  # analysis must not be needed
    code, out, err = run_cli("check", path, "--json")
    assert code == 0, err
    assert calls == [(None, False)]
    assert json.loads(out)["warnings"][-1]["kind"] == "criteria"
    assert (
        "certification.valid_months: must be a whole number"
        in json.loads(out)["warnings"][-1]["message"]
    )


def test_check_skips_criteria_when_none(
    make_study, run_cli, monkeypatch: pytest.MonkeyPatch
) -> None:
    seen: dict[str, Any] = {}
    _fake_layers(monkeypatch, [Problem(Location("x"), "should not be called")], seen)
    assert run_cli("check", make_study())[0] == 0
    assert seen == {}


def test_check_help_is_fast_and_imports_no_pandas() -> None:
    code = (
        "import sys; from reportgen.cli import main\n"
        "try:\n    main(['check', '--help'])\nexcept SystemExit:\n    pass\n"
        "heavy = [m for m in ('pandas', 'matplotlib', 'weasyprint', 'jinja2', 'scipy') if m in sys.modules]\n"
        "print('HEAVY', heavy)\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert "Usage:" in out and "HEAVY []" in out


def test_default_categories_constant_matches_conftest() -> None:
    assert [c["code"] for c in DEFAULT_CATEGORIES] == ["P", "S", "X"]
