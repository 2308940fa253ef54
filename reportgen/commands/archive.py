"""``reportgen archive``: keep a built revision unaltered in the archive and index it."""

from __future__ import annotations

import json
from pathlib import Path

import click

from . import progress_printer


@click.command("archive")
@click.argument("revision_dir", type=click.Path(path_type=Path, file_okay=False))
@click.option(
    "--archive",
    "archive_dir",
    type=click.Path(path_type=Path, file_okay=False),
    default=None,
    help="Archive folder (default: $REPORTGEN_ARCHIVE, else archive/ beside output/).",
)
@click.option("--json", "as_json", is_flag=True, help="Print the index row as JSON.")
@click.option("-q", "--quiet", is_flag=True, help="Print nothing but errors.")
def command(revision_dir: Path, archive_dir: Path | None, as_json: bool, quiet: bool) -> None:
    """Copy a built revision (output/<study-id>/rev<N>) into the archive, read-only, and index it.

    Archived revisions are never overwritten or deleted; a new revision of a study is archived
    beside the old one and supersedes it.
    """
    from ..archive import archive_revision, resolve_archive_dir

    root = resolve_archive_dir(archive_dir, revision_dir=revision_dir)
    entry = archive_revision(revision_dir, archive_dir=root, progress=progress_printer(quiet))
    if as_json:
        click.echo(json.dumps(entry.__dict__, indent=2, sort_keys=True))
    elif not quiet:
        click.echo(
            f"archived {entry.study_id} rev{entry.revision} ({entry.verdict or 'no verdict'}, "
            f"{len(entry.files)} files) in {root / entry.folder}"
        )
