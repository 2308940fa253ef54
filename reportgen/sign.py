"""Digital signatures on report PDFs, with pyHanko (no cryptography of our own).

``sign_report`` adds a standard PDF signature as an incremental update: the unsigned report
bytes stay an exact prefix of the signed file, so the built PDF remains reproducible and its
attachments readable.  ``check_signatures`` reads every signature back: whether the signed
bytes are intact, whether the signature covers the whole file (nothing was appended after
signing), who signed (the certificate's subject) and when (the time the signer's software
reported), and whether the certificate chains to a trusted root given by the caller.

pyHanko is imported only inside the functions.
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

from .errors import ExistsError, InputError

DEFAULT_REASON = "Sign-off of the attribute agreement study report"
FIELD_NAME = "ReportgenSignOff"


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


def _load_signer(key: Path, passphrase: bytes | None):  # type: ignore[no-untyped-def]
    from pyhanko.sign import signers

    if not key.is_file():
        raise InputError.single(key, "the key file does not exist", key="--key")
    try:
        with _quiet_pyhanko():  # pyHanko logs a traceback for a wrong passphrase; we say it plainly
            signer = signers.SimpleSigner.load_pkcs12(str(key), passphrase=passphrase)
    except Exception as exc:  # noqa: BLE001 - pyHanko/cryptography raise many types here
        hint = (
            "give the passphrase with --passphrase-env VAR"
            if passphrase is None
            else "check the passphrase"
        )
        raise InputError.single(
            key, f"cannot read the PKCS#12 key file: {type(exc).__name__}: {exc}", hint=hint
        ) from None
    if signer is None:
        hint = (
            "give the passphrase with --passphrase-env VAR"
            if passphrase is None
            else "check the passphrase"
        )
        raise InputError.single(
            key, "cannot read the PKCS#12 key file (wrong or missing passphrase?)", hint=hint
        )
    return signer


def sign_report(
    pdf: str | Path,
    *,
    key: str | Path,
    passphrase: bytes | None = None,
    output: str | Path | None = None,
    reason: str = DEFAULT_REASON,
    location: str | None = None,
) -> Path:
    """Sign ``pdf`` with the PKCS#12 ``key``; write ``output`` (default ``<stem>-signed.pdf``)."""
    from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
    from pyhanko.pdf_utils.misc import PdfReadError
    from pyhanko.sign import signers

    from .archive import write_output

    src = Path(pdf)
    if not src.is_file():
        raise InputError.single(src, "the report PDF does not exist")
    out = Path(output) if output else src.with_name(f"{src.stem}-signed.pdf")
    if out.exists():
        raise ExistsError(
            f"{out} already exists; a signed report is never overwritten — choose another -o"
        )
    signer = _load_signer(Path(key), passphrase)
    refuse_not_genuine(src)
    data = src.read_bytes()
    try:
        writer = IncrementalPdfFileWriter(io.BytesIO(data), strict=False)
        existing = _field_names(data)
        name = FIELD_NAME if FIELD_NAME not in existing else f"{FIELD_NAME}{len(existing) + 1}"
        meta = signers.PdfSignatureMetadata(field_name=name, reason=reason, location=location)
        signed = signers.sign_pdf(writer, meta, signer=signer)
    except (PdfReadError, ValueError, KeyError) as exc:
        raise InputError.single(src, f"cannot be signed: {type(exc).__name__}: {exc}") from None
    write_output(out, signed.getvalue())
    return out


def refuse_not_genuine(src: Path) -> None:
    """Raise InputError when ``verify`` calls the report NOT GENUINE: it is never signed."""
    from .verify import verify_report

    v = verify_report(src)
    if not v.ok:
        failed = ", ".join(dict.fromkeys(f.check for f in v.failures()))
        first = v.failures()[0]
        raise InputError.single(
            src,
            f"verify calls this report NOT GENUINE (failed: {failed}: {first.message}); "
            "it is not signed",
            hint="run `reportgen verify` on it for every finding; sign only the report as built",
        )


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
