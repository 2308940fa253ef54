"""The bytes after a PDF's original revision: where it ends, and what was appended.

Used by ``verify`` (the ``appended`` check) and by ``archive`` (a folder's PDF must be the
built bytes, or a signed copy whose updates a signature covers).  It depends on nothing else
in reportgen, so both can use it without importing each other.
"""

from __future__ import annotations

import io
import re
from typing import Any

_EOF = re.compile(rb"%%EOF[ \t]*(?:\r\n|\r|\n)?")
_BYTE_RANGE = re.compile(rb"/ByteRange\s*\[\s*(\d+)\s+(\d+)\s+(\d+)\s+(\d+)\s*\]")


def revision_ends(data: bytes) -> list[int]:
    """Byte offsets just after each end-of-file marker (one per revision of the file)."""
    return [m.end() for m in _EOF.finditer(data)]


def original_end(data: bytes) -> int:
    """Where the original revision ends (after its first end-of-file marker)."""
    ends = revision_ends(data)
    return ends[0] if ends else len(data)


def appended_problems(data: bytes, end: int, *, signed: bool) -> list[str]:
    """What was appended after the original revision that is not allowed (empty: nothing)."""
    tail = data[end:]
    if not tail.strip():
        return []
    if not signed:
        return [
            f"{len(tail)} byte(s) were appended after the report as built "
            f"({_describe_tail(data, end)}); an unsigned report has nothing appended"
        ]
    problems = []
    sig_ends = {int(m.group(3)) + int(m.group(4)) for m in _BYTE_RANGE.finditer(data)}
    for e in revision_ends(data):
        if e <= end:
            continue
        covered = any(abs(e - s) <= 2 for s in sig_ends)
        if not covered:
            problems.append(
                f"an update ending at byte {e} is not covered by a signature "
                f"({_describe_tail(data, end)})"
            )
    if revision_ends(data) and revision_ends(data)[-1] < len(data.rstrip(b"\r\n\x00 ")):
        problems.append("bytes after the last end-of-file marker")
    problems += _added_objects(data, end)
    return problems


def _added_objects(data: bytes, end: int) -> list[str]:
    """Annotations and form fields the full file has that the original revision does not,
    other than signature fields."""
    import pypdf

    try:
        full = pypdf.PdfReader(io.BytesIO(data))
        orig = pypdf.PdfReader(io.BytesIO(data[:end]))
    except Exception as exc:  # noqa: BLE001
        return [f"the updated file cannot be read: {exc}"]
    out = []
    for n, (pf, po) in enumerate(zip(full.pages, orig.pages, strict=False), start=1):
        before = _annotations(po)
        after = [
            a
            for a, obj in zip(_annotations(pf), pf.get("/Annots") or [], strict=False)
            if not _is_signature_widget(obj)
        ]
        if after != before:
            extra = [a for a in after if a not in before] or after
            out.append(f"page {n}: annotations added after the report was built: {extra[:3]}")
        if _content_ids(pf) != _content_ids(po):
            out.append(f"page {n}: its content was replaced after the report was built")
    if len(full.pages) != len(orig.pages):
        out.append(
            f"pages added or removed after the report was built ({len(orig.pages)} → {len(full.pages)})"
        )
    try:
        fields = full.get_fields() or {}
    except Exception:  # noqa: BLE001
        fields = {}
    for name, f in sorted(fields.items()):
        if str(f.get("/FT")) != "/Sig":
            out.append(f"a form field {name!r} was added after the report was built")
    return out


def _content_ids(page: Any) -> str:
    """A digest of the page's content stream and resources (changes when either is replaced)."""
    import hashlib

    try:
        contents = page.get_contents()
        body = contents.get_data() if contents is not None else b""
    except Exception:  # noqa: BLE001
        body = b"?"
    try:
        res = repr(sorted(page.get("/Resources", {}).get_object().keys()))
    except Exception:  # noqa: BLE001
        res = "?"
    return hashlib.sha256(body + res.encode()).hexdigest()


def _is_signature_widget(ref: Any) -> bool:
    """An invisible signature field's widget (zero-area rectangle), as ``reportgen sign`` adds."""
    try:
        a = ref.get_object()
        if str(a.get("/Subtype")) != "/Widget":
            return False
        ft = a.get("/FT")
        if ft is None and a.get("/Parent") is not None:
            ft = a["/Parent"].get_object().get("/FT")
        x0, y0, x1, y1 = (float(v) for v in a.get("/Rect", [0, 0, 0, 0]))
        return str(ft) == "/Sig" and (x1 - x0) * (y1 - y0) == 0
    except Exception:  # noqa: BLE001
        return False


def _describe_tail(data: bytes, end: int) -> str:
    tail = data[end:]
    what = []
    for word, name in (
        (b"/Annot", "annotations"),
        (b"/AcroForm", "form fields"),
        (b"/Contents", "page content"),
        (b"/Sig", "a signature"),
    ):
        if word in tail:
            what.append(name)
    updates = len([e for e in revision_ends(data) if e > end])
    return f"{updates} incremental update(s)" + (f" with {', '.join(what)}" if what else "")


def _annotations(page: Any) -> list[str]:
    out = []
    for a in page.get("/Annots") or []:
        try:
            a = a.get_object()
            kind = str(a.get("/Subtype", "?"))
            words = a.get("/Contents") or a.get("/T") or ""
            out.append(f"{kind} {str(words)[:60]}".strip())
        except Exception:  # noqa: BLE001 - a damaged annotation is still an annotation
            out.append("an unreadable annotation")
    return out
