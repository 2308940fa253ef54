"""Fixtures of the render tests: real builds of the demo studies and of small invented studies.

Builds are costly (charts, fonts, WeasyPrint), so each demo study is built once per session,
by the one ``reportgen demo`` run that tests/conftest.py shares with tests/test_examples.py
(fixed build time ``GENERATED_AT``); tests read the files and must not write into them.
"""

from __future__ import annotations

import datetime as dt
import shutil
import subprocess
from pathlib import Path
from typing import Any

import pytest

REPO = Path(__file__).resolve().parents[2]
STUDIES = REPO / "studies"
GENERATED_AT = "2026-11-20T09:00:00Z"
WHEN = dt.datetime(2026, 11, 20, 9, 0, tzinfo=dt.UTC)

#: section headings, with the words of /shared/VOCABULARY.md ("Report sections, in order"), in
#: the order of its direction for this version: the core first, then the method statement and
#: the appendix
SECTION_TITLES = [
    "Summary and verdict",
    "Scope",
    "Study design",
    "Data integrity",
    "Rater repeatability",
    "Rater accuracy",
    "Rater-to-rater reproducibility",
    "Panel accuracy",
    "Category confusion",
    "Ordered-scale agreement",
    "Hard items",
    "Inspector certification",
    "Sign-off",
    "Reading the coefficients",
    "Method statement",
    "Appendix",
]


class Built:
    """One built report: folder, study, results and the bytes of each file."""

    def __init__(self, folder: Path, study: Any) -> None:
        self.folder = folder
        self.study = study
        stem = f"{study.id}-rev{study.revision}"
        self.html_path = folder / f"{stem}.html"
        self.pdf_path = folder / f"{stem}.pdf"
        self.html = self.html_path.read_text(encoding="utf-8")
        self.pdf = self.pdf_path.read_bytes() if self.pdf_path.exists() else None
        import json

        self.results = json.loads((folder / "results.json").read_text(encoding="utf-8"))


def build(study_yaml: Path, out: Path, **kw: Any) -> Built:
    from reportgen.render.build import build_report
    from reportgen.study import load_study

    study = load_study(study_yaml)
    folder = build_report(study, output_dir=out, generated_at=kw.pop("generated_at", WHEN), **kw)
    return Built(folder, study)


def from_demo(run: Any, folder: str) -> Built:
    """The report the shared demo run built for ``studies/<folder>``."""
    from conftest import DEMO_GENERATED_AT

    from reportgen.study import load_study

    assert DEMO_GENERATED_AT == GENERATED_AT
    assert run.exit_code == 0, (run.output, run.result.exception)
    study = load_study(STUDIES / folder / "study.yaml")
    return Built(run.folder(study.id, study.revision), study)


@pytest.fixture(scope="session")
def built_binary(demo_run_once: Any) -> Built:
    """The seal-check demo (binary, reference, criteria, certification, safety-related)."""
    return from_demo(demo_run_once, "seal-check")


@pytest.fixture(scope="session")
def built_ordinal(demo_run_once: Any) -> Built:
    """The finish-grading demo (ordinal, reference file, criteria)."""
    return from_demo(demo_run_once, "finish-grading")


@pytest.fixture(scope="session")
def built_nominal(demo_run_once: Any) -> Built:
    """The defect-triage demo (nominal, one trial, no reference file)."""
    return from_demo(demo_run_once, "defect-triage")


def pdftotext_pages(pdf: Path) -> list[str]:
    """Text of each page (poppler's pdftotext; pypdf as fallback)."""
    if shutil.which("pdftotext"):
        out = subprocess.run(
            ["pdftotext", "-layout", str(pdf), "-"], check=True, capture_output=True, text=True
        ).stdout
        pages = out.split("\f")
        return pages[:-1] if pages and not pages[-1].strip() else pages
    import pypdf

    return [p.extract_text() or "" for p in pypdf.PdfReader(str(pdf)).pages]


def small_study(folder: Path, **overrides: Any) -> Path:
    """A small invented study (12 items, 3 raters, 2 trials, no bootstrap) for quick builds."""
    from conftest import write_study

    base: dict[str, Any] = {
        "n_items": 12,
        "bootstrap": {"resamples": 0, "seed": 1},
        "criteria": {
            "source": "Invented test procedure",
            "rules": [
                {
                    "measure": "reproducibility.fleiss_kappa",
                    "pass": 0.75,
                    "marginal": 0.4,
                    "judge": "estimate",
                }
            ],
        },
        "signoff": {"prepared_by": "Test Preparer"},
    }
    base.update(overrides)
    return write_study(folder, **base)


def keyed_study(folder: Path, *, seed: int = 2718) -> Path:
    """A small invented study run from a reportgen plan: the cable-lug check of tests/_built.py,
    planned with ``seed``, its plan folder copied into the study folder as ``plan/``, the
    data-entry file filled with the known calls, and the study pointed at it and at the key
    (``ratings: plan/ratings-entry.csv``, ``key: plan/key/key.csv``).  Returns study.yaml."""
    import csv
    import io

    from _built import CALLS, study_files

    from reportgen.plan import load_items, make_plan, plan_settings, write_plan
    from reportgen.study import load_study

    study_file = study_files(folder / "study")
    study_dir = study_file.parent
    (study_dir / "items.csv").write_text(
        "item,reference\n"
        + "".join(
            f"LUG-{i:02d},{r}\n"
            for i, r in enumerate(CALLS["L1"][0], start=1)  # L1 = reference
        ),
        encoding="utf-8",
    )
    study = load_study(study_file)
    items = load_items(study_dir / "items.csv", study)
    settings = plan_settings(study, seed=seed, today=dt.date(2026, 11, 2))
    plan_dir = write_plan(
        make_plan(study, items, settings), study, output_dir=folder / "plan-out", pdf=False
    )
    shutil.copytree(plan_dir, study_dir / "plan")
    key_rows = list(csv.DictReader(io.StringIO((study_dir / "plan/key/key.csv").read_text())))
    key = {k["label"]: (k["item"], int(k["trial"])) for k in key_rows}
    entry = list(csv.DictReader(io.StringIO((study_dir / "plan/ratings-entry.csv").read_text())))
    lines = ["item,rater,trial,rating"]
    for row in entry:
        item, trial = key[row["item"]]
        assert int(row["trial"]) == trial
        call = CALLS[row["rater"]][trial - 1][int(item.split("-")[1]) - 1]
        lines.append(f"{row['item']},{row['rater']},{row['trial']},{call}")
    (study_dir / "plan/ratings-entry.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    text = study_file.read_text(encoding="utf-8")
    assert "ratings: ratings.csv\n" in text
    study_file.write_text(
        text.replace(
            "ratings: ratings.csv\n", "ratings: plan/ratings-entry.csv\nkey: plan/key/key.csv\n"
        ),
        encoding="utf-8",
    )
    (study_dir / "ratings.csv").unlink()  # only the coded entry file remains
    return study_file
