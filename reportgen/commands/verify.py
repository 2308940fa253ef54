"""``reportgen verify``: is this report PDF genuine?"""

from __future__ import annotations

import json
from pathlib import Path

import click

from . import json_option, progress_printer, quiet_option


@click.command("verify")
@click.argument("report", type=click.Path(path_type=Path, dir_okay=False))
@click.option(
    "--trust",
    type=click.Path(path_type=Path, dir_okay=False, exists=True),
    multiple=True,
    help="A certificate (PEM or DER) trusted to sign reports; repeatable. With it, a signature "
    "by anyone else fails.",
)
@json_option("the findings")
@quiet_option()
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
    elif not quiet:
        click.echo(result.format(), nl=False)
    elif not result.ok:  # only the problems: the failed checks, no "ok" lines
        lines = [f"{report}: NOT GENUINE"]
        for f in result.failures():
            lines.append(f"  FAIL  {f.check}: {f.message}")
            lines += [f"          {d}" for d in f.details]
        click.echo("\n".join(lines))
    if not result.ok:
        if as_json:  # the findings above are the whole JSON answer
            raise click.exceptions.Exit(1)
        failed = ", ".join(dict.fromkeys(f.check for f in result.failures()))
        raise CheckFailed(f"{report}: not genuine (failed: {failed})")
