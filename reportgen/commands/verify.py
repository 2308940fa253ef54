"""``reportgen verify``: is this report PDF genuine?"""

from __future__ import annotations

import json
from pathlib import Path

import click

from . import progress_printer


@click.command("verify")
@click.argument("report", type=click.Path(path_type=Path, dir_okay=False))
@click.option(
    "--trust",
    type=click.Path(path_type=Path, dir_okay=False, exists=True),
    multiple=True,
    help="A certificate (PEM or DER) trusted to sign reports; repeatable. With it, a signature "
    "by anyone else fails.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the findings as JSON.")
@click.option("-q", "--quiet", is_flag=True, help="Print only failures.")
def command(report: Path, trust: tuple[Path, ...], as_json: bool, quiet: bool) -> None:
    """Check a report PDF: its signature (if signed), its attachments, the SHA-256 of its inputs,
    a recomputation of every figure with this reportgen, and the figures it prints.

    Exit 0 when the report is genuine, 1 when any check fails, 2 when the file is no readable PDF.
    """
    from ..errors import CheckFailed
    from ..verify import verify_report

    progress = progress_printer(quiet or as_json)
    result = verify_report(report, trust=trust, progress=progress)
    if as_json:
        click.echo(json.dumps(result.as_dict(), indent=2))
    elif not quiet or not result.ok:
        click.echo(result.format(), nl=False)
    if not result.ok:
        if as_json:  # the findings above are the whole JSON answer
            raise click.exceptions.Exit(1)
        failed = ", ".join(dict.fromkeys(f.check for f in result.failures()))
        raise CheckFailed(f"{report}: not genuine (failed: {failed})")
