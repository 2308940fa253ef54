"""The ``reportgen`` command: parses, calls the library, maps errors to exit codes.

Each command lives in ``reportgen/commands/<name>.py`` and exposes ``command`` (a click
command).  Those modules import only click at top level; the statistics and the render
stack are imported inside the command functions, so ``--help`` and ``check`` stay fast.
No statistics here.
"""

from __future__ import annotations

import importlib
import json
import os
import sys
import traceback

import click

from .errors import ExitCode, ReportgenError

COMMANDS = (
    "init",
    "check",
    "plan",
    "stats",
    "build",
    "verify",
    "sign",
    "archive",
    "history",
    "register",
    "demo",
)


class _LazyGroup(click.Group):
    def list_commands(self, ctx: click.Context) -> list[str]:
        return [c for c in COMMANDS if self.get_command(ctx, c) is not None]

    def get_command(self, ctx: click.Context, name: str) -> click.Command | None:
        if name not in COMMANDS:
            return None
        try:
            mod = importlib.import_module(f"reportgen.commands.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"reportgen.commands.{name}":
                return None
            raise
        cmd = getattr(mod, "command", None)
        return cmd if isinstance(cmd, click.Command) else None


@click.group(cls=_LazyGroup, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="reportgen")
@click.option(
    "--traceback",
    "show_traceback",
    is_flag=True,
    help="Show the Python traceback on internal errors.",
)
@click.pass_context
def cli(ctx: click.Context, show_traceback: bool) -> None:
    """Attribute agreement studies for inspection: plan, check, analyse, judge, report, archive."""
    ctx.ensure_object(dict)
    ctx.obj["traceback"] = show_traceback


def report_error(err: ReportgenError, *, as_json: bool = False) -> int:
    """Print a library error to stderr (or JSON to stdout) and return its exit code."""
    problems = err.problems()
    if as_json:
        click.echo(json.dumps({"ok": False, "problems": [p.as_dict() for p in problems]}, indent=2))
    else:
        for p in problems:
            click.echo(p.format(), err=True)
    return int(err.exit_code)


def main(argv: list[str] | None = None) -> None:
    # The engine multiplies many small matrices (bootstrap replicates × patterns): a second BLAS
    # thread only spins and competes for the core (measured: typical study 20 ms → 37 ms on two
    # shared cores).  Takes effect when numpy is first imported by a command; a user's setting wins.
    os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
    os.environ.setdefault("MKL_NUM_THREADS", "1")
    args = sys.argv[1:] if argv is None else argv
    as_json = "--json" in args
    try:
        rv = cli.main(args=args, prog_name="reportgen", standalone_mode=False)
    except click.exceptions.Abort:
        click.echo("aborted", err=True)
        sys.exit(1)
    except click.exceptions.Exit as exc:
        sys.exit(exc.exit_code)
    except click.ClickException as exc:
        exc.show()
        sys.exit(ExitCode.INPUT)
    except ReportgenError as err:
        sys.exit(report_error(err, as_json=as_json))
    except KeyboardInterrupt:
        click.echo("interrupted", err=True)
        sys.exit(130)
    except Exception:  # noqa: BLE001 - last resort: a bug in reportgen
        if "--traceback" in args:
            traceback.print_exc()
        else:
            click.echo(
                f"internal error: {sys.exc_info()[1]!r}\n  hint: re-run with --traceback and report it",
                err=True,
            )
        sys.exit(ExitCode.INTERNAL)
    sys.exit(int(rv) if isinstance(rv, int) else 0)
