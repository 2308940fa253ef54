"""One module per command; each exposes ``command``.  Import only click at top level.

The shared pieces of the command-line grammar live here, so that every command spells them the
same way (the README's "One command line" table; ``tests/test_cli_grammar.py`` checks it):

* the study is the first argument ``STUDY``: a study definition (``study.yaml``) or its folder;
* ``-o/--output`` wherever something is written; ``--archive DIR`` wherever an archive is read
  or written (see :mod:`reportgen.places` for the one resolution rule);
* ``--json`` where a command reports, ``-q/--quiet`` prints only problems.
"""

from __future__ import annotations

import os
import sys
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import click

ARCHIVE_HELP = (
    "Archive folder (default: $REPORTGEN_ARCHIVE, else the nearest archive/ holding an index "
    "in this folder or a parent, else ./archive)."
)


def show_progress(quiet: bool) -> bool:
    """Whether progress lines are printed at all: always, unless ``--quiet``.

    Result lines (what was written, the verdict) are not progress: they print unless ``--quiet``.
    """
    return not quiet


def _on_terminal() -> bool:
    return not os.environ.get("CI") and sys.stderr.isatty()


def progress_printer(quiet: bool, *, log: bool = True) -> Callable[[str], None] | None:
    """The ``progress`` callable the library functions take, or None with ``--quiet``.

    On a terminal each stage prints as ``  stage …``; otherwise (a log file, CI) each stage is
    one line ``[  12.3 s] stage`` with the seconds since the command started, so a log shows
    where the time goes.  Always on stderr: stdout stays the command's answer.  ``log=False``
    (commands that take well under a second, or print JSON) keeps a log free of stage lines.
    """
    if not show_progress(quiet) or (not log and not _on_terminal()):
        return None
    start = time.perf_counter()
    if _on_terminal():

        def show(msg: str) -> None:
            click.echo(f"  {msg} …", err=True)

    else:

        def show(msg: str) -> None:
            click.echo(f"[{time.perf_counter() - start:6.1f} s] {msg}", err=True)

    return show


class StudyPath(click.ParamType):
    """``STUDY``: a study definition file, or a folder holding ``study.yaml``."""

    name = "study"

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> Path:
        path = Path(value)
        if path.is_dir():
            inner = path / "study.yaml"
            if not inner.is_file():
                self.fail(f"{path} is a folder without a study.yaml", param, ctx)
            return inner
        return path


def study_argument(**kwargs: Any) -> Callable[[Any], Any]:
    """The first argument of every command that reads a study."""
    return click.argument("study", metavar="STUDY", type=StudyPath(), **kwargs)


def archive_option(**kwargs: Any) -> Callable[[Any], Any]:
    """``--archive DIR`` with the one resolution rule (see :mod:`reportgen.places`)."""
    opts: dict[str, Any] = {
        "type": click.Path(path_type=Path, file_okay=False),
        "default": None,
        "metavar": "DIR",
        "help": ARCHIVE_HELP,
    }
    opts.update(kwargs)
    return click.option("--archive", "archive_dir", **opts)


def quiet_option() -> Callable[[Any], Any]:
    return click.option("-q", "--quiet", is_flag=True, help="Print only problems.")


def json_option(what: str) -> Callable[[Any], Any]:
    return click.option("--json", "as_json", is_flag=True, help=f"Print {what} as JSON.")
