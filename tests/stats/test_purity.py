"""The numeric core imports only numpy at module level (STATS-API.md; issue 3)."""

from __future__ import annotations

import json
import subprocess
import sys

MODULES = [
    "reportgen.stats",
    "reportgen.stats.tables",
    "reportgen.stats.fleiss",
    "reportgen.stats.krippendorff",
    "reportgen.stats.gwet",
    "reportgen.stats.bootstrap",
    "reportgen.stats.weights",
    "reportgen.stats.results",
    "reportgen.stats.binomial_fit",
    "reportgen.stats.gauge_curve",
    "reportgen.stats.pod",
    "reportgen.stats.zone",
    "reportgen.measured",
]
FORBIDDEN = ["pandas", "jinja2", "matplotlib", "weasyprint", "scipy", "statsmodels", "sklearn"]


def test_importing_the_stats_core_pulls_in_no_heavy_packages() -> None:
    code = (
        "import sys, json\n"
        + "".join(f"import {m}\n" for m in MODULES)
        + f"print(json.dumps(sorted(m for m in {FORBIDDEN!r} if m in sys.modules)))\n"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=60
    )
    assert json.loads(out.stdout) == []


def test_the_check_itself_detects_a_heavy_import() -> None:
    code = "import sys, json, reportgen.stats.tables, pandas\nprint(json.dumps('pandas' in sys.modules))"
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True, timeout=60
    )
    assert json.loads(out.stdout) is True
