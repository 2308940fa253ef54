"""The numeric core imports only numpy at module level (every module, discovered)."""

from __future__ import annotations

import json
import subprocess
import sys


def _discover() -> list[str]:
    """Every module of the stats package, found on disk (a new module is checked unasked)."""
    import pkgutil

    import reportgen.stats as pkg

    return ["reportgen.stats"] + sorted(
        f"reportgen.stats.{m.name}" for m in pkgutil.iter_modules(pkg.__path__)
    )


MODULES = _discover()
#: modules outside the package held to the same rule
ALSO = ["reportgen.measured"]  # measured.py: numpy and the stats core only
FORBIDDEN = ["pandas", "jinja2", "matplotlib", "weasyprint", "scipy", "statsmodels", "sklearn"]


def test_importing_the_stats_core_pulls_in_no_heavy_packages() -> None:
    code = (
        "import sys, json\n"
        + "".join(f"import {m}\n" for m in MODULES + ALSO)
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


def test_discovery_finds_every_module_file() -> None:
    from pathlib import Path

    import reportgen.stats as pkg

    files = {p.stem for p in Path(pkg.__file__).parent.glob("*.py") if p.stem != "__init__"}
    assert {m.rsplit(".", 1)[1] for m in MODULES[1:]} == files
    assert len(files) >= 13
