"""``reportgen verify``: is this report PDF genuine?"""

from __future__ import annotations

import json
from pathlib import Path

import click

from . import progress_printer


@click.command("verify")
@click.argument("report", type=click.Path(path_type=Path, dir_okay=False), required=False)
@click.option(
    "--trust",
    type=click.Path(path_type=Path, dir_okay=False, exists=True),
    multiple=True,
    help="A certificate (PEM or DER) trusted to sign reports; repeatable. With it, a signature "
    "by anyone else fails.",
)
@click.option(
    "--archive",
    "archive_dir",
    type=click.Path(path_type=Path, file_okay=False),
    default=None,
    help="Also re-check every file of this archive against the SHA-256 of its index, and say "
    "whether REPORT is archived there. REPORT may then be left out.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the findings as JSON.")
@click.option("-q", "--quiet", is_flag=True, help="Print only failures.")
def command(
    report: Path | None,
    trust: tuple[Path, ...],
    archive_dir: Path | None,
    as_json: bool,
    quiet: bool,
) -> None:
    """Check a report PDF: its signature (if signed), its attachments, the SHA-256 of its inputs,
    a recomputation of every figure with this reportgen, and the figures it prints.

    Exit 0 when the report is genuine, 1 when any check fails, 2 when the file is no readable PDF.
    """
    from ..errors import CheckFailed
    from ..verify import verify_report

    if report is None and archive_dir is None:
        raise click.UsageError("give the REPORT to check, or --archive DIR, or both")
    archive_ok = True
    if archive_dir is not None:
        from ..archive import resolve_archive_dir
        from ..archivecheck import archive_summary

        archive_ok, lines = archive_summary(resolve_archive_dir(archive_dir), report)
        if not as_json and (not quiet or not archive_ok):
            click.echo("\n".join(lines))
        if report is None:
            if not archive_ok:
                raise CheckFailed("the archive is not intact: see the files listed above")
            return
    assert report is not None
    progress = progress_printer(quiet or as_json)
    result = verify_report(report, trust=trust, progress=progress)
    if as_json:
        click.echo(json.dumps(result.as_dict(), indent=2))
    elif not quiet or not result.ok:
        click.echo(result.format(), nl=False)
    if not archive_ok and result.ok:
        raise CheckFailed("the archive is not intact: see the files listed above")
    if not result.ok:
        if as_json:  # the findings above are the whole JSON answer
            raise click.exceptions.Exit(1)
        failed = ", ".join(dict.fromkeys(f.check for f in result.failures()))
        raise CheckFailed(f"{report}: not genuine (failed: {failed})")
