"""``reportgen verify``: is this report PDF genuine?"""

from __future__ import annotations

import json
from pathlib import Path

import click

from . import archive_option, json_option, progress_printer, quiet_option


def _signed_copy_notes(report: Path) -> list[str]:
    """For a PDF inside an archive: its indexed signed copies, or what it is a signed copy of."""
    from ..signedcopy import archive_root_of, signed_copies

    root = archive_root_of(report)
    if root is None:
        return []
    rel = report.resolve().relative_to(root.resolve()).as_posix()
    notes = []
    for c in signed_copies(root):
        who = f"signed by {c['signer']}" + (f" at {c['signed_at']}" if c["signed_at"] else "")
        if c["original"] == rel:
            notes.append(f"signed copy in the archive: {root / c['file']} ({who})")
        elif c["file"] == rel:
            notes.append(f"this is the indexed signed copy of {root / c['original']} ({who})")
    return notes


@click.command("verify")
@click.argument("report", type=click.Path(path_type=Path, dir_okay=False), required=False)
@click.option(
    "--trust",
    type=click.Path(path_type=Path, dir_okay=False, exists=True),
    multiple=True,
    help="A certificate (PEM or DER) trusted to sign reports; repeatable. With it, a signature "
    "by anyone else fails.",
)
@archive_option(
    help="Also re-check every file of this archive against the SHA-256 of its index, and say "
    "whether REPORT is archived there. REPORT may then be left out.",
)
@json_option("the findings")
@quiet_option()
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
        from ..archive import list_entries, resolve_archive_dir
        from ..archivecheck import archive_summary

        root = resolve_archive_dir(archive_dir)
        archive_ok, lines = archive_summary(root, list_entries(root), report)
        if not as_json and (not quiet or not archive_ok):
            click.echo("\n".join(lines))
        if report is None:
            if not archive_ok:
                raise CheckFailed("the archive is not intact: see the files listed above")
            return
    assert report is not None
    progress = progress_printer(quiet or as_json)
    result = verify_report(report, trust=trust, progress=progress)
    signed_notes = _signed_copy_notes(report)
    if as_json:
        click.echo(
            json.dumps({**result.as_dict(), "archive_signed_copies": signed_notes}, indent=2)
        )
    elif not quiet:
        click.echo(result.format(), nl=False)
        for note in signed_notes:
            click.echo(f"  note  {note}")
    elif not result.ok:  # only the problems: the failed checks, no "ok" lines
        lines = [f"{report}: NOT GENUINE"]
        for f in result.failures():
            lines.append(f"  FAIL  {f.check}: {f.message}")
            lines += [f"          {d}" for d in f.details]
        click.echo("\n".join(lines))
    if not archive_ok and result.ok:
        raise CheckFailed("the archive is not intact: see the files listed above")
    if not result.ok:
        if as_json:  # the findings above are the whole JSON answer
            raise click.exceptions.Exit(1)
        failed = ", ".join(dict.fromkeys(f.check for f in result.failures()))
        raise CheckFailed(f"{report}: not genuine (failed: {failed})")
