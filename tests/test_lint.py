"""The code base stays clean under the project's ruff rules (pyproject.toml [tool.ruff])."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _ruff() -> list[str]:
    exe = Path(sys.executable).with_name("ruff")
    if exe.exists():
        return [str(exe)]
    found = shutil.which("ruff")
    assert found, "ruff is a test dependency (pip install -e '.[test]')"
    return [found]


def test_ruff_check_passes() -> None:
    proc = subprocess.run(
        [*_ruff(), "check", "--no-cache", "reportgen", "tests", "benchmarks", "studies", "system"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
    )
    assert proc.returncode == 0, proc.stdout[-4000:] + proc.stderr[-2000:]


def test_ruff_format_is_applied() -> None:
    proc = subprocess.run(
        [
            *_ruff(),
            "format",
            "--check",
            "--no-cache",
            "reportgen",
            "tests",
            "benchmarks",
            "studies",
            "system",
        ],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
    )
    assert proc.returncode == 0, "run `make fix`:\n" + proc.stdout[-4000:]
