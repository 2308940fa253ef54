"""``reportgen archive``: keep a built revision unaltered in the archive and index it."""

from __future__ import annotations

import json
from pathlib import Path

import click

from . import archive_option, json_option, progress_printer, quiet_option


@click.command("archive")
@click.argument(
    "revision_dir", metavar="REVISION", type=click.Path(path_type=Path, file_okay=False)
)
@archive_option()
@json_option("the index row")
@quiet_option()
def command(revision_dir: Path, archive_dir: Path | None, as_json: bool, quiet: bool) -> None:
    """Copy a built revision (output/<study-id>/rev<N>) into the archive, read-only, and index it.

    Archived revisions are never overwritten or deleted; a new revision of a study is archived
    beside the old one and supersedes it.
    """
    from ..archive import archive_revision
    from ..places import archive_location, require_archive

    root = archive_location(archive_dir)
    require_archive(root, writing=True)
    entry = archive_revision(
        revision_dir, archive_dir=root, progress=progress_printer(quiet, log=not as_json)
    )
    if as_json:
        click.echo(json.dumps(entry.__dict__, indent=2, sort_keys=True))
    elif not quiet:
        click.echo(
            f"archived {entry.study_id} rev{entry.revision} ({entry.verdict or 'no verdict'}, "
            f"{len(entry.files)} files) in {root / entry.folder}"
        )
