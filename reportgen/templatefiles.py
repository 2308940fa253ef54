"""Company templates are read only from regular files inside the declared folder.

A symbolic link, a FIFO, a device or a socket anywhere in the folder (or on the way to a
template) is refused when the template is loaded, with the path named: a template folder must
never become a way to put another file of the machine (``/etc/passwd``) into a report.
"""

from __future__ import annotations

import os
import stat
from pathlib import Path
from typing import Any

from .errors import RenderError


def _refuse(path: Path, why: str) -> RenderError:
    return RenderError(
        f"company template folder: {path} is {why}; templates are read only from regular files "
        "inside the declared folder (no symbolic links, no special files)"
    )


def check_regular(folder: Path, path: Path) -> None:
    """Raise RenderError unless every step from ``folder`` to ``path`` is a plain folder/file."""
    folder = Path(folder)
    rel = Path(os.path.normpath(path)).relative_to(os.path.normpath(folder))
    if ".." in rel.parts:
        raise _refuse(path, "outside the folder")
    step = folder
    for i, part in enumerate(rel.parts):
        step = step / part
        try:
            st = os.lstat(step)
        except FileNotFoundError:
            return  # not there: the loader says "not found"
        if stat.S_ISLNK(st.st_mode):
            raise _refuse(step, "a symbolic link")
        last = i == len(rel.parts) - 1
        if last and not stat.S_ISREG(st.st_mode):
            raise _refuse(step, "not a regular file (a FIFO, device or socket?)")
        if not last and not stat.S_ISDIR(st.st_mode):
            raise _refuse(step, "not a folder")


def regular_template_files(folder: Path) -> list[Path]:
    """Every file of the folder, sorted; RenderError at the first symlink or special file."""
    folder = Path(folder)
    st = os.lstat(folder)
    if stat.S_ISLNK(st.st_mode):
        raise _refuse(folder, "a symbolic link")
    out = []
    for dirpath, dirnames, filenames in os.walk(folder, followlinks=False):
        for name in sorted(dirnames + filenames):
            p = Path(dirpath) / name
            mode = os.lstat(p).st_mode
            if stat.S_ISLNK(mode):
                raise _refuse(p, "a symbolic link")
            if name in filenames and not stat.S_ISREG(mode):
                raise _refuse(p, "not a regular file (a FIFO, device or socket?)")
            if name in filenames:
                out.append(p)
        dirnames.sort()
    return sorted(out)


def regular_file_loader(folder: Path) -> Any:
    """A Jinja2 FileSystemLoader over ``folder`` that checks each template before reading it."""
    import jinja2

    class RegularFileLoader(jinja2.FileSystemLoader):
        def get_source(self, environment: Any, template: str) -> Any:
            pieces = jinja2.loaders.split_template_path(template)
            check_regular(Path(folder), Path(folder).joinpath(*pieces))
            return super().get_source(environment, template)

    return RegularFileLoader(str(folder), encoding="utf-8", followlinks=False)
