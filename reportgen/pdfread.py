"""Reading the files embedded in a report PDF (pypdf, imported inside the function).

Shared by ``verify`` and ``archive`` so that neither imports the other.
"""

from __future__ import annotations

from pathlib import Path

from .errors import InputError

#: Attachments that ``build`` writes itself (not inputs of the study).
GENERATED_ATTACHMENTS = frozenset({"results.json", "build-record.json"})


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
