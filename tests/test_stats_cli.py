"""``reportgen stats``: end to end from a study definition on disk, summary and JSON."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from reportgen.cli import main

# Design A of tests/test_analysis.py (hand counts written out there): binary G/D, 4 items,
# 2 raters, 2 trials, reference I1 D, I2 D, I3 G, I4 G.
RATINGS = {
    ("I1", "R1"): "DD",
    ("I2", "R1"): "DG",
    ("I3", "R1"): "GG",
    ("I4", "R1"): "GG",
    ("I1", "R2"): "DD",
    ("I2", "R2"): "GG",
    ("I3", "R2"): "GD",
    ("I4", "R2"): "GG",
}

STUDY = """\
study:
  id: CLI-TEST
  title: "Hand-countable binary study"
scale: binary
categories:
  - {code: G, label: Good}
  - {code: D, label: Defect}
defect_category: D
raters:
  - {id: R1, name: "First Rater"}
  - {id: R2, name: "Second Rater"}
trials: 2
ratings: ratings.csv
reference: reference.csv
bootstrap: {resamples: 0, seed: 1}
"""


@pytest.fixture
def study_path(tmp_path: Path) -> Path:
    lines = ["item,rater,trial,rating"]
    for (item, rater), calls in RATINGS.items():
        for t, call in enumerate(calls, start=1):
            lines.append(f"{item},{rater},{t},{call}")
    (tmp_path / "ratings.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    (tmp_path / "reference.csv").write_text(
        "item,reference\nI1,D\nI2,D\nI3,G\nI4,G\n", encoding="utf-8"
    )
    path = tmp_path / "study.yaml"
    path.write_text(STUDY, encoding="utf-8")
    return path


def run(args: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    with pytest.raises(SystemExit) as exc:
        main(args)
    out, err = capsys.readouterr()
    return int(exc.value.code or 0), out, err


def test_json_end_to_end(study_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = run(["stats", str(study_path), "--json"], capsys)
    assert code == 0, err
    res = json.loads(out)
    assert res["schema"] == "reportgen-results/1"
    assert res["study"] == {
        "id": "CLI-TEST",
        "revision": 1,
        "title": "Hand-countable binary study",
        "scale": "binary",
    }
    assert res["design"]["items"] == 4 and res["design"]["ratings"] == 16
    # hand counts (see tests/test_analysis.py, design A)
    assert res["repeatability"]["R1"]["agreement"]["agreeing"] == 3
    assert res["accuracy"]["R2"]["miss_rate"]["estimate"] == 0.5
    assert res["panel_accuracy"]["agreement"]["agreeing"] == 2
    assert res["reproducibility"]["fleiss_kappa"]["estimate"] == pytest.approx(7 / 15, abs=1e-12)
    assert res["hard_items"] == ["I2", "I3"]
    # strict JSON: no NaN or Infinity anywhere
    json.dumps(res, allow_nan=False)
    assert err == ""  # no progress on a non-terminal


def test_summary_end_to_end(study_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    code, out, err = run(["stats", str(study_path)], capsys)
    assert code == 0, err
    assert "Study CLI-TEST (revision 1)" in out
    assert "Design: 4 items, 2 raters, 2 trials" in out
    for heading in (
        "Rater repeatability",
        "Rater accuracy",
        "Rater-to-rater reproducibility",
        "Panel accuracy",
        "Hard items",
        "Reading the coefficients",
    ):
        assert heading in out, heading
    assert "3/4" in out  # R1 repeatability Agreeing/Items
    assert "Ordered-scale agreement" not in out  # binary study


def test_bad_input_names_the_file(study_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    (study_path.parent / "ratings.csv").unlink()
    code, out, err = run(["stats", str(study_path)], capsys)
    assert code == 2
    assert "ratings.csv" in err


def test_bad_input_as_json(study_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    text = (study_path.parent / "ratings.csv").read_text(encoding="utf-8")
    (study_path.parent / "ratings.csv").write_text(
        text.replace("I3,R2,2,D", "I3,R2,2,Q"), encoding="utf-8"
    )
    code, out, err = run(["stats", str(study_path), "--json"], capsys)
    assert code == 2
    problems = json.loads(out)["problems"]
    assert any(p["file"].endswith("ratings.csv") and p["line"] for p in problems)


def test_progress_everywhere_but_quiet(monkeypatch: pytest.MonkeyPatch) -> None:
    from reportgen.commands import progress_printer, show_progress  # the one progress rule

    class Tty:
        def isatty(self) -> bool:
            return True

    monkeypatch.setattr(sys, "stderr", Tty())
    monkeypatch.delenv("CI", raising=False)
    assert show_progress(quiet=False) is True
    assert show_progress(quiet=True) is False
    assert progress_printer(quiet=True) is None
    monkeypatch.setenv("CI", "true")  # a log: stage lines with seconds, unless quiet
    assert show_progress(quiet=False) is True
    assert progress_printer(quiet=False) is not None
    assert progress_printer(quiet=False, log=False) is None


def test_command_module_imports_no_heavy_libraries() -> None:
    code = (
        "import sys, reportgen.cli, reportgen.commands.stats; "
        "heavy = [m for m in ('numpy', 'pandas', 'scipy', 'matplotlib', 'jinja2', 'weasyprint') if m in sys.modules]; "
        "print(heavy); sys.exit(1 if heavy else 0)"
    )
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=False)
    assert proc.returncode == 0, proc.stdout + proc.stderr


def test_json_text_has_one_line_per_item() -> None:
    """The --json text: same data as json.dumps, indented, one compact line per item record
    (fast on 100,000 items; the C encoder writes the item list)."""
    from reportgen.commands.stats import dumps_results

    results = {
        "schema": "reportgen-results/1",
        "items": [
            {"id": 'odd}, {"id": x', "counts": {"A": 1, "B": 0}, "agreement": None},
            {"id": "I2", "counts": {"A": 0, "B": 2}, "agreement": 1.0},
        ],
        "warnings": [],
    }
    text = dumps_results(results)
    assert json.loads(text) == results
    lines = text.splitlines()
    item_lines = [ln for ln in lines if ln.lstrip().startswith('{"id"')]
    assert len(item_lines) == 2
    assert all(ln.startswith("    {") for ln in item_lines)
    assert json.loads(dumps_results({"items": [], "a": 1})) == {"items": [], "a": 1}
    with pytest.raises(ValueError):
        dumps_results({"items": [{"id": "x", "v": float("nan")}]})
