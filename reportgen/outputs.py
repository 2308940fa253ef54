"""Where outputs may go: never inside an archive, never over a file the tool did not write.

``register``, ``history``, ``sign``, ``build`` and ``plan`` call :func:`refuse_inside_archive`
before writing, and :func:`refuse_foreign_file` before replacing an existing file: an output
path inside an archive folder (the folder holding ``index.sqlite``, or any folder below it), the
index itself, or an existing file that is not one this tool writes (judged by its content, not
its name) is refused with exit code 5 and nothing is written.  A path that is not a regular file
(``/dev/null``, a FIFO) is refused as bad input (exit 2).
"""

from __future__ import annotations

import os
import stat
from pathlib import Path

from .errors import ExistsError, InputError

INDEX_NAME = "index.sqlite"  # archive.INDEX_NAME (not imported: archive imports this module)
ENTRY_NAME = "archive-entry.json"


def archive_containing(path: Path) -> Path | None:
    """The archive folder ``path`` lies in (or is), else None."""
    p = Path(os.path.abspath(path))
    if p.name in (INDEX_NAME, ENTRY_NAME):
        return p.parent
    for folder in (p, *p.parents):
        try:
            if (folder / INDEX_NAME).is_file() or (folder / ENTRY_NAME).is_file():
                return folder
        except OSError:
            continue
    return None


def refuse_inside_archive(path: Path, what: str) -> None:
    """ExistsError when ``path`` is inside an archive folder (see the module docstring)."""
    root = archive_containing(path)
    if root is not None:
        raise ExistsError(
            f"{path} is inside the archive {root}: {what} is never written into an archive, whose "
            "folders and index are written only by `reportgen archive` — choose a path outside it"
        )


def refuse_special(path: Path, *, key: str | None = None) -> None:
    """InputError when ``path`` exists and is not a regular file (a device, FIFO, folder …)."""
    try:
        st = os.stat(path)
    except (FileNotFoundError, NotADirectoryError):
        return  # not there (or under a file: said when the folder is made)
    except OSError as exc:
        raise InputError.single(
            path, f"cannot be written: {exc.strerror or exc}", key=key
        ) from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError.single(path, "is a folder; give a file name", key=key)
    if not stat.S_ISREG(st.st_mode):
        raise InputError.single(
            path,
            "is not a regular file (a device such as /dev/null, or a FIFO); outputs are written "
            "only as regular files",
            key=key,
        )


#: how each kind of output starts (within its first 4096 bytes), to recognise our own files
_MARKS: dict[str, tuple[bytes, ...]] = {
    ".csv": (b"inspector,characteristic,",),
    ".html": (b'name="generator" content="reportgen',),
    ".htm": (b'name="generator" content="reportgen',),
    ".pdf": (b"/Creator (reportgen", b"/Creator <"),
}


def written_by_reportgen(path: Path) -> bool:
    """True when the existing file looks like one of our outputs (by its content)."""
    marks = _MARKS.get(path.suffix.lower())
    if not marks:
        return False
    try:
        with open(path, "rb") as fh:
            head = fh.read(50 << 20 if path.suffix.lower() == ".pdf" else 4096)
    except OSError:
        return False
    if path.suffix.lower() == ".pdf":
        return b"reportgen" in head and any(m in head for m in marks)
    return any(m in head for m in marks)


def refuse_foreign_file(path: Path) -> None:
    """ExistsError when ``path`` exists and is not a file this tool wrote."""
    if os.path.lexists(path) and not written_by_reportgen(Path(path)):
        raise ExistsError(
            f"{path} exists and was not written by reportgen; it is never replaced — choose "
            "another file name, or move that file away"
        )


def check_output_folder(folder: Path, *, key: str = "--output") -> None:
    """InputError when the output folder exists as something other than a folder (``/dev/null``,
    a file), or lies under a file."""
    p = Path(folder)
    for step in (p, *p.parents):
        if os.path.lexists(step):
            if not step.is_dir():
                what = (
                    "is not a folder (a file or a device)"
                    if step == p
                    else f"lies under {step}, which is not a folder"
                )
                raise InputError.single(
                    p, f"this output path {what}; give a folder to write into", key=key
                )
            return
