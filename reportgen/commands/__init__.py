"""One module per command; each exposes ``command``.  Import only click at top level."""

from __future__ import annotations

import os
import sys
from collections.abc import Callable


def show_progress(quiet: bool) -> bool:
    """Progress lines go to stderr only on a terminal, never with ``--quiet`` or ``CI`` set.

    Result lines (what was written, the verdict) are not progress: they print unless ``--quiet``.
    """
    return not quiet and not os.environ.get("CI") and sys.stderr.isatty()


def progress_printer(quiet: bool) -> Callable[[str], None] | None:
    """The ``progress`` callable the library functions take, or None when nothing is shown."""
    if not show_progress(quiet):
        return None
    import click

    def show(msg: str) -> None:
        click.echo(f"  {msg} …", err=True)

    return show
