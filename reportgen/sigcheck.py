"""Checking the signatures of a PDF (pyHanko, imported inside the functions).

Kept apart from :mod:`reportgen.sign`, which signs (and so needs ``verify`` and the archive's
writer), so that ``verify`` and ``archive`` can check signatures without importing either.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import io
import logging
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .errors import InputError


@dataclass(frozen=True)
class SignatureCheck:
    """One signature found in a PDF."""

    field: str
    signer: str  # subject of the signing certificate, in words
    signed_at: str | None  # ISO 8601 UTC, as reported by the signer
    intact: bool  # the signed bytes are unchanged
    valid: bool  # the cryptographic signature checks out
    whole_file: bool  # the signature covers the whole file: nothing was added after signing
    trusted: bool  # the certificate chains to a trust root given to the check
    reason: str | None

    @property
    def ok(self) -> bool:
        return self.intact and self.valid and self.whole_file

    def describe(self) -> str:
        when = self.signed_at or "an unknown time"
        if not (self.intact and self.valid):
            return f"signature '{self.field}' by {self.signer} is BROKEN: the signed bytes were changed after signing"
        if not self.whole_file:
            return (
                f"signature '{self.field}' by {self.signer} ({when}) is intact but does NOT cover the whole file: "
                "content was added after signing"
            )
        trust = (
            "certificate trusted"
            if self.trusted
            else "certificate not in the given trust list; check who the signer is"
        )
        return f"signed by {self.signer} at {when}; intact, covers the whole file; {trust}"


def _field_names(data: bytes) -> list[str]:
    from pyhanko.pdf_utils.reader import PdfFileReader

    try:
        reader = PdfFileReader(io.BytesIO(data), strict=False)
        return [s.field_name for s in reader.embedded_signatures]
    except Exception:  # noqa: BLE001 - an unreadable file is reported by the caller
        return []


def has_signature(data: bytes) -> bool:
    """Cheap test before importing pyHanko: a signed PDF has a /ByteRange."""
    return b"/ByteRange" in data


def check_signatures(data: bytes, *, trust: tuple[Path, ...] = ()) -> list[SignatureCheck]:
    """Every signature of the PDF ``data``, checked."""
    from pyhanko.keys import load_cert_from_pemder
    from pyhanko.pdf_utils.reader import PdfFileReader
    from pyhanko.sign.validation import validate_pdf_signature
    from pyhanko.sign.validation.errors import SignatureValidationError
    from pyhanko.sign.validation.status import SignatureCoverageLevel
    from pyhanko_certvalidator import ValidationContext

    if not has_signature(data):
        return []
    roots = []
    for t in trust:
        try:
            roots.append(load_cert_from_pemder(str(t)))
        except Exception as exc:  # noqa: BLE001
            raise InputError.single(
                t, f"cannot read the certificate: {exc}", key="--trust"
            ) from None
    ctx = ValidationContext(trust_roots=roots, allow_fetching=False)
    reader = PdfFileReader(io.BytesIO(data), strict=False)
    with _quiet_pyhanko():
        return [
            _check_one(
                sig, ctx, validate_pdf_signature, SignatureValidationError, SignatureCoverageLevel
            )
            for sig in reader.embedded_signatures
        ]


@contextlib.contextmanager
def _quiet_pyhanko() -> Iterator[None]:
    """pyHanko logs a traceback for every untrusted certificate; we report trust ourselves."""
    loggers = [logging.getLogger(n) for n in ("pyhanko", "pyhanko_certvalidator")]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.setLevel(logging.CRITICAL + 1)
    try:
        yield
    finally:
        for lg, lv in zip(loggers, levels, strict=True):
            lg.setLevel(lv)


def _check_one(sig: Any, ctx: Any, validate: Any, error: Any, coverage: Any) -> SignatureCheck:
    signer = "an unknown signer"
    try:
        cert = sig.signer_cert
        signer = cert.subject.human_friendly
    except Exception:  # noqa: BLE001
        pass
    try:
        status = validate(sig, ctx)
    except (error, ValueError) as exc:
        return SignatureCheck(sig.field_name, signer, None, False, False, False, False, str(exc))
    when = status.signer_reported_dt
    reason = None
    try:
        reason = (
            str(sig.sig_object.get("/Reason"))
            if sig.sig_object.get("/Reason") is not None
            else None
        )
    except Exception:  # noqa: BLE001
        reason = None
    return SignatureCheck(
        field=sig.field_name,
        signer=signer,
        signed_at=when.astimezone(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ") if when else None,
        intact=bool(status.intact),
        valid=bool(status.valid),
        whole_file=status.coverage == coverage.ENTIRE_FILE,
        trusted=bool(status.trusted),
        reason=reason,
    )
