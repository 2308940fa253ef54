"""reportgen: attribute agreement studies for inspection, from plan to archived report.

The library API (imported lazily, so that ``reportgen --help`` stays fast)::

    from reportgen import load_study, load_ratings, analyse, judge, build_report
    study = load_study("studies/seal-check/study.yaml")
    results = analyse(study, load_ratings(study))
    results.update(judge(study, results))
"""

from __future__ import annotations

import importlib
from importlib.metadata import PackageNotFoundError, version
from typing import Any

try:
    __version__ = version("reportgen")
except PackageNotFoundError:  # running from a checkout without install
    __version__ = "0.0.0+checkout"

_API = {
    "load_study": "reportgen.study",
    "load_ratings": "reportgen.ratings",
    "analyse": "reportgen.analysis",
    "judge": "reportgen.verdict",
    "validate_criteria": "reportgen.verdict",
    "build_report": "reportgen.render.build",
}

__all__ = ["__version__", *_API]


def __getattr__(name: str) -> Any:
    if name in _API:
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'reportgen' has no attribute {name!r}")
