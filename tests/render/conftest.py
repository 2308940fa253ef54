"""Fixtures of the render tests: real builds of the demo studies and of small invented studies.

Builds are costly (charts, fonts, WeasyPrint), so each demo study is built once per session
into a temporary folder with a fixed ``generated_at``; tests read the files.
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

#: section headings, in the order of /shared/VOCABULARY.md ("Report sections, in order")
SECTION_TITLES = [
    "Summary and verdict",
    "Scope",
    "Study design",
    "Method statement",
    "Data integrity",
    "Rater repeatability",
    "Rater accuracy",
    "Rater-to-rater reproducibility",
    "Panel accuracy",
    "Category confusion",
    "Ordered-scale agreement",
    "Hard items",
    "Reading the coefficients",
    "Inspector certification",
    "Sign-off",
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


@pytest.fixture(scope="session")
def built_binary(tmp_path_factory: pytest.TempPathFactory) -> Built:
    """The seal-check demo (binary, reference, criteria, certification, safety-related)."""
    return build(STUDIES / "seal-check" / "study.yaml", tmp_path_factory.mktemp("binary"))


@pytest.fixture(scope="session")
def built_ordinal(tmp_path_factory: pytest.TempPathFactory) -> Built:
    """The finish-grading demo (ordinal, reference file, criteria)."""
    return build(STUDIES / "finish-grading" / "study.yaml", tmp_path_factory.mktemp("ordinal"))


@pytest.fixture(scope="session")
def built_nominal(tmp_path_factory: pytest.TempPathFactory) -> Built:
    """The defect-triage demo (nominal, one trial, no reference file)."""
    return build(STUDIES / "defect-triage" / "study.yaml", tmp_path_factory.mktemp("nominal"))


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
