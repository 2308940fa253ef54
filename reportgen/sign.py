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

import io
from pathlib import Path

from .errors import ExistsError, InputError
from .sigcheck import SignatureCheck, _field_names, check_signatures, has_signature  # noqa: F401  (re-exported)

DEFAULT_REASON = "Sign-off of the attribute agreement study report"
FIELD_NAME = "ReportgenSignOff"


def _load_signer(key: Path, passphrase: bytes | None, cert: Path | None = None):  # type: ignore[no-untyped-def]
    from .signkey import load_signer

    return load_signer(key, cert, passphrase)


def sign_report(
    pdf: str | Path,
    *,
    key: str | Path,
    passphrase: bytes | None = None,
    output: str | Path | None = None,
    reason: str = DEFAULT_REASON,
    location: str | None = None,
    cert: str | Path | None = None,
) -> Path:
    """Sign ``pdf`` with ``key`` (PKCS#12, or a PEM private key with ``cert`` or its certificate
    in the same file); write ``output`` (default ``<stem>-signed.pdf``)."""
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
    signer = _load_signer(Path(key), passphrase, Path(cert) if cert else None)
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
