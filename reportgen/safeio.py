"""Read an input file with its size limit, whatever the path is.

The limit holds for the file actually read: a symbolic link is followed and the file it leads
to is checked; anything that is not a regular file (a FIFO, which would wait for a writer
forever; a device such as ``/dev/zero``, which never ends; a socket) is refused before a byte is
read, and no more than ``limit + 1`` bytes are ever read, so a file that grows while it is read
is refused too.
"""

from __future__ import annotations

import os
import stat

from .errors import InputError


def require_regular(path: str | os.PathLike[str], *, shown: str, what: str) -> None:
    """InputError unless ``path`` leads to a regular file (nothing is read)."""
    read_limited(path, None, shown=shown, what=what)


def read_limited(
    path: str | os.PathLike[str], limit: int | None, *, shown: str, what: str
) -> bytes:
    """The bytes of ``path``; InputError naming ``shown`` when it is no regular file or too big.

    With ``limit=None`` only the kind of file is checked and nothing is read.
    """
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_NOCTTY", 0)
    try:
        fd = os.open(path, flags)
    except FileNotFoundError:
        raise InputError.single(shown, f"{what} file not found") from None
    except IsADirectoryError:
        raise InputError.single(shown, f"is a folder, not a {what} file") from None
    except OSError as exc:
        raise InputError.single(shown, f"cannot read the {what}: {exc.strerror or exc}") from None
    try:
        st = os.fstat(fd)
        if stat.S_ISDIR(st.st_mode):
            raise InputError.single(shown, f"is a folder, not a {what} file")
        if not stat.S_ISREG(st.st_mode):
            kind = (
                "a FIFO (named pipe)"
                if stat.S_ISFIFO(st.st_mode)
                else "a device"
                if stat.S_ISCHR(st.st_mode) or stat.S_ISBLK(st.st_mode)
                else "a socket"
                if stat.S_ISSOCK(st.st_mode)
                else "not a regular file"
            )
            raise InputError.single(
                shown,
                f"the {what} is {kind}, not a regular file; only regular files are read",
            )
        if limit is None:
            return b""
        if st.st_size > limit:
            raise InputError.single(
                shown, f"{what} file is {st.st_size:,} bytes; the limit is {limit:,}"
            )
        os.set_blocking(fd, True)
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, min(1 << 20, limit + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
            if total > limit:
                raise InputError.single(
                    shown, f"{what} file is more than {limit:,} bytes; the limit is {limit:,}"
                )
        return b"".join(chunks)
    finally:
        os.close(fd)
