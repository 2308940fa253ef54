"""Where things are: the one rule that finds the archive for every command.

``--archive DIR`` when given; else ``$REPORTGEN_ARCHIVE``; else the nearest folder named
``archive`` that holds an archive index, looking in the current folder and then in each parent
(so ``cd studies/weld && reportgen history`` finds the project's archive); else ``archive/`` in
the current folder (created by the first ``archive``).  Only the standard library is imported.
"""

from __future__ import annotations

import os
from pathlib import Path

ENV_ARCHIVE = "REPORTGEN_ARCHIVE"
ARCHIVE_FOLDER = "archive"
INDEX_NAME = "index.sqlite"


def archive_location(
    explicit: str | os.PathLike[str] | None = None, *, cwd: Path | None = None
) -> Path:
    """The archive folder by the rule above, as an absolute path."""
    if explicit:
        return Path(explicit).expanduser().resolve()
    env = os.environ.get(ENV_ARCHIVE)
    if env:
        return Path(env).expanduser().resolve()
    here = (cwd or Path.cwd()).resolve()
    for folder in (here, *here.parents):
        candidate = folder / ARCHIVE_FOLDER
        if (candidate / INDEX_NAME).is_file():
            return candidate
    return here / ARCHIVE_FOLDER


def require_archive(root: Path, *, writing: bool = False) -> None:
    """Refuse a folder that is not an archive (no index), naming it (exit 2).

    A missing folder passes (reading then says there is no archive; writing creates it), and for
    writing so does an empty one.
    """
    from .errors import InputError

    if (root / INDEX_NAME).is_file() or not root.exists():
        return  # missing: reading says "no archive here" (archive.open_index), writing creates it
    if writing and root.is_dir() and not any(root.iterdir()):
        return
    what = "a file" if not root.is_dir() else f"a folder without an archive index ({INDEX_NAME})"
    raise InputError.single(
        root,
        f"not an archive: {what}",
        hint="give the folder `reportgen archive` wrote, with --archive DIR or REPORTGEN_ARCHIVE",
    )
