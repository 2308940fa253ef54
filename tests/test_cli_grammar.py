"""One command-line grammar: every command's options against the README's table.

The grammar (README, "One command line"): the study is the first argument STUDY, ``-o/--output``
where something is written, ``--archive DIR`` with one resolution rule wherever an archive is
read or written, ``--json`` and ``-q/--quiet`` everywhere, and no option name that is a count in
one command and a file in another.
"""

from __future__ import annotations

import re
from pathlib import Path

import click
from click.testing import CliRunner

from reportgen.cli import COMMANDS, cli
from reportgen.places import archive_location

ROOT = Path(__file__).resolve().parent.parent


def _command(name: str) -> click.Command:
    cmd = cli.get_command(click.Context(cli), name)
    assert cmd is not None, name
    return cmd


def _visible(cmd: click.Command) -> list[click.Option]:
    return [p for p in cmd.params if isinstance(p, click.Option) and not p.hidden]


def _opt(cmd: click.Command, flag: str) -> click.Option | None:
    return next((p for p in _visible(cmd) if flag in p.opts), None)


def _cells(name: str) -> list[str]:
    """The README table row of a command, computed from the command itself."""
    cmd = _command(name)
    args = [p for p in cmd.params if isinstance(p, click.Argument)]
    first = "–"
    if args:
        first = f"`{args[0].metavar or args[0].name.upper()}`"
        if name == "init":
            first += " (folder)"
    out = _opt(cmd, "--output")
    writes = "–"
    if out is not None:
        assert "-o" in out.opts, f"{name}: --output without -o"
        writes = "`-o, --output`"
    arch = _opt(cmd, "--archive")
    archive = "–"
    if arch is not None:
        archive = (
            "`--archive [DIR]`" if arch.is_flag or arch._flag_needs_value else "`--archive DIR`"
        )
    reports = "`--json`" if _opt(cmd, "--json") is not None else "–"
    q = _opt(cmd, "--quiet")
    quiet = "`-q, --quiet`" if q is not None and "-q" in q.opts else "–"
    return [f"`{name}`", first, writes, archive, reports, quiet]


def _readme_rows() -> dict[str, list[str]]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = text.split("### One command line", 1)[1].split("\n### ", 1)[0]
    rows = {}
    for line in section.splitlines():
        if line.startswith("| `"):
            cells = [c.strip() for c in line.strip().strip("|").split("|")]
            rows[cells[0].strip("`")] = cells
    return rows


def test_readme_table_matches_every_command() -> None:
    rows = _readme_rows()
    assert sorted(rows) == sorted(COMMANDS)
    for name in COMMANDS:
        assert rows[name] == _cells(name), name


def test_every_command_has_json_and_quiet() -> None:
    for name in COMMANDS:
        cmd = _command(name)
        assert _opt(cmd, "--json") is not None, name
        q = _opt(cmd, "--quiet")
        assert q is not None and "-q" in q.opts, name


def test_the_study_is_the_first_argument_everywhere() -> None:
    for name in ("init", "check", "plan", "stats", "build"):
        args = [p for p in _command(name).params if isinstance(p, click.Argument)]
        assert args and args[0].metavar == "STUDY", name


def test_archive_option_is_the_same_everywhere() -> None:
    helps = set()
    for name in ("archive", "build", "history", "register"):
        opt = _opt(_command(name), "--archive")
        assert opt is not None and opt.metavar == "DIR", name
        assert "REPORTGEN_ARCHIVE" in (opt.help or "") and "nearest archive/" in opt.help, name
        helps.add(opt.name)
    assert helps == {"archive_dir"}


def test_a_count_and_a_file_never_share_an_option_name() -> None:
    kinds: dict[str, set[str]] = {}
    for name in COMMANDS:
        for opt in _visible(_command(name)):
            if isinstance(opt.type, click.Path):
                kind = "file"
            elif isinstance(opt.type, (click.types.IntParamType, click.IntRange)) and not opt.count:
                kind = "count"
            else:
                continue
            for flag in opt.opts:
                kinds.setdefault(flag, set()).add(kind)
    mixed = {flag: k for flag, k in kinds.items() if len(k) > 1}
    assert mixed == {}
    assert kinds["--items"] == {"file"} and kinds["--item-count"] == {"count"}


def test_archive_rule_finds_the_nearest_archive_upwards(tmp_path: Path, monkeypatch) -> None:
    monkeypatch.delenv("REPORTGEN_ARCHIVE", raising=False)
    project = tmp_path / "project"
    deep = project / "studies" / "weld"
    deep.mkdir(parents=True)
    # no archive yet: ./archive of the current folder
    assert archive_location(cwd=deep) == (deep / "archive").resolve()
    (project / "archive").mkdir()
    # a folder named archive without an index is not an archive
    assert archive_location(cwd=deep) == (deep / "archive").resolve()
    (project / "archive" / "index.sqlite").write_bytes(b"")
    assert archive_location(cwd=deep) == (project / "archive").resolve()
    monkeypatch.setenv("REPORTGEN_ARCHIVE", str(tmp_path / "env"))
    assert archive_location(cwd=deep) == (tmp_path / "env").resolve()
    assert archive_location(tmp_path / "given", cwd=deep) == (tmp_path / "given").resolve()


def test_help_texts_name_the_study_the_same_way() -> None:
    runner = CliRunner()
    for name in ("check", "plan", "stats", "build"):
        res = runner.invoke(cli, [name, "--help"], prog_name="reportgen")
        assert res.exit_code == 0
        usage = res.output.splitlines()[0]
        assert re.search(rf"reportgen {name} \[OPTIONS\] STUDY\b", usage), usage
