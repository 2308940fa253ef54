"""The command line as a whole: fast start-up, exit codes, every command and option documented."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import click
import pytest

from reportgen.cli import COMMANDS, cli

ROOT = Path(__file__).resolve().parent.parent
HEAVY = ("pandas", "matplotlib", "weasyprint", "jinja2", "scipy", "openpyxl", "pypdf")


def _imported_modules(*args: str) -> set[str]:
    proc = subprocess.run(
        [sys.executable, "-X", "importtime", "-m", "reportgen", *args],
        capture_output=True,
        text=True,
        check=False,
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    names = set()
    for line in proc.stderr.splitlines():
        if line.startswith("import time:") and "|" in line:
            names.add(line.rsplit("|", 1)[1].strip())
    return names


@pytest.mark.parametrize("args", [("--help",), ("check", "--help"), ("build", "--help")])
def test_help_does_not_import_the_render_stack(args: tuple[str, ...]) -> None:
    mods = _imported_modules(*args)
    assert "reportgen.cli" in mods
    heavy = sorted(m for m in mods if m.split(".")[0] in HEAVY)
    assert heavy == [], f"`reportgen {' '.join(args)}` imported {heavy[:5]}"


def test_every_command_is_registered() -> None:
    ctx = click.Context(cli)
    assert cli.list_commands(ctx) == list(COMMANDS)


def _readme() -> str:
    return (ROOT / "README.md").read_text(encoding="utf-8")


@pytest.mark.parametrize("name", COMMANDS)
def test_every_command_is_documented_with_an_example(name: str) -> None:
    text = _readme()
    assert f"### reportgen {name}" in text, f"README lacks a '### reportgen {name}' subsection"
    section = text.split(f"### reportgen {name}", 1)[1].split("\n### ", 1)[0]
    assert f"reportgen {name}" in section.split("\n", 1)[1], f"no example of `reportgen {name}`"


@pytest.mark.parametrize("name", COMMANDS)
def test_every_option_is_documented(name: str) -> None:
    text = _readme()
    cmd = cli.get_command(click.Context(cli), name)
    assert cmd is not None
    missing = []
    for param in cmd.params:
        if isinstance(param, click.Option):
            longs = [o for o in param.opts if o.startswith("--")]
            if longs and not any(o in text for o in longs) and longs != ["--help"]:
                missing.append(longs[0])
    assert missing == [], f"README does not mention {missing} of `reportgen {name}`"


def test_unknown_command_is_a_usage_error() -> None:
    proc = subprocess.run(
        [sys.executable, "-m", "reportgen", "no-such-command"],
        capture_output=True,
        text=True,
        check=False,
    )
    assert proc.returncode == 2
    assert "no-such-command" in proc.stderr
