"""Is this report genuine?  Read a report PDF back and check it against itself.
"""

from __future__ import annotations

from pathlib import Path

from .errors import InputError


def read_attachments(pdf: str | Path) -> dict[str, bytes]:
    """The embedded files of a PDF, by name (first one when a name repeats)."""
    import pypdf
    from pypdf.errors import PdfReadError

    path = Path(pdf)
    try:
        reader = pypdf.PdfReader(str(path))
        found = reader.attachments
        return {str(name): bytes(datas[0]) for name, datas in found.items() if datas}
    except (OSError, PdfReadError, ValueError, KeyError, TypeError) as exc:
        raise InputError.single(path, f"cannot be read as a PDF: {exc}") from None
