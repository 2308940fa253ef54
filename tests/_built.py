"""Test helper: build small real reports (invented studies) and tamper with their PDFs.

The studies are small (12 items, 3 raters, 2 trials, no bootstrap) so that a full build —
analysis, verdict, charts, HTML, PDF/A-3b with attachments — takes a few seconds.
"""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path

GENERATED_AT = dt.datetime(2026, 11, 20, 9, 0, tzinfo=dt.UTC)

# Invented scenario: a crimp-height go/no-go check by eye on cable lugs.
# 12 lugs, reference G (good) or B (bad); three inspectors, two trials each.
REFERENCE = ["G", "G", "B", "G", "B", "G", "G", "B", "G", "G", "B", "G"]
# per rater and trial: the calls on the 12 lugs
CALLS = {
    "L1": [REFERENCE, REFERENCE],
    "L2": [
        ["G", "G", "B", "G", "B", "G", "B", "B", "G", "G", "B", "G"],
        ["G", "G", "B", "G", "B", "G", "G", "B", "G", "G", "B", "G"],
    ],
    "L3": [
        ["G", "G", "G", "G", "B", "G", "G", "B", "G", "G", "B", "G"],
        ["G", "G", "B", "G", "B", "G", "G", "B", "G", "B", "B", "G"],
    ],
}


def study_files(
    folder: Path,
    study_id: str = "LUG-CHECK",
    revision: int = 1,
    *,
    date: str = "2026-11-16",
    flip: int | None = None,
) -> Path:
    """Write study.yaml, ratings.csv and reference.csv; ``flip`` changes one call of L3."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "study.yaml").write_text(
        f"""study:
  id: {study_id}
  title: "Cable lug crimp check by eye"
  characteristic: "Lug crimp"
  station: "Harness cell 1"
  revision: {revision}
  date: {date}
scale: binary
categories:
  - {{code: G, label: Good}}
  - {{code: B, label: Bad}}
defect_category: B
raters:
  - {{id: L1, name: "Marta Quist"}}
  - {{id: L2, name: "Oren Falk"}}
  - {{id: L3, name: "Priya Nand"}}
trials: 2
ratings: ratings.csv
reference: reference.csv
confidence: 0.95
bootstrap: {{resamples: 0, seed: 3}}
criteria:
  source: "Harness cell work instruction HC-WI-3 (invented for the tests)"
  marginal_is: improve
  rules:
    - {{measure: accuracy.*.effectiveness, pass: 0.9, marginal: 0.8, judge: estimate}}
certification:
  source: "Harness cell qualification HC-QP-1 (invented for the tests)"
  valid_months: 12
  rules:
    - {{measure: accuracy.effectiveness, pass: 0.9, judge: estimate}}
""",
        encoding="utf-8",
    )
    rows = ["item,rater,trial,rating"]
    for rater, trials in CALLS.items():
        for t, calls in enumerate(trials, start=1):
            for i, c in enumerate(calls, start=1):
                if flip is not None and rater == "L3" and t == 1 and i == flip:
                    c = "B" if c == "G" else "G"
                rows.append(f"LUG-{i:02d},{rater},{t},{c}")
    (folder / "ratings.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (folder / "reference.csv").write_text(
        "item,reference\n"
        + "".join(f"LUG-{i:02d},{r}\n" for i, r in enumerate(REFERENCE, start=1)),
        encoding="utf-8",
    )
    return folder / "study.yaml"


def build(study_yaml: Path, output: Path) -> Path:
    """Build the report; return the revision folder."""
    from reportgen.render.build import build_report
    from reportgen.study import load_study

    return build_report(load_study(study_yaml), output_dir=output, generated_at=GENERATED_AT)


def rewrite_attachments(src: Path, dst: Path, attachments: dict[str, bytes]) -> Path:
    """Copy the PDF ``src`` to ``dst`` with its embedded files replaced by ``attachments``."""
    import pypdf
    from pypdf.generic import NameObject

    writer = pypdf.PdfWriter(clone_from=pypdf.PdfReader(str(src)))
    root = writer._root_object
    names = root.get("/Names")
    if names is not None:
        names = names.get_object()
        if "/EmbeddedFiles" in names:
            del names[NameObject("/EmbeddedFiles")]
    if "/AF" in root:
        del root[NameObject("/AF")]
    for name, data in attachments.items():
        writer.add_attachment(name, data)
    buf = io.BytesIO()
    writer.write(buf)
    dst.write_bytes(buf.getvalue())
    return dst


def attachments_of(pdf: Path) -> dict[str, bytes]:
    from reportgen.verify import read_attachments

    return read_attachments(pdf)


def self_signed_p12(
    folder: Path, *, common_name: str = "Ines Caro", passphrase: bytes | None = b"s3cret"
) -> tuple[Path, Path]:
    """A self-signed EC certificate and key as signer.p12 (and the certificate as signer.pem)."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.hazmat.primitives.serialization import pkcs12
    from cryptography.x509.oid import NameOID

    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name(
        [
            x509.NameAttribute(NameOID.COMMON_NAME, common_name),
            x509.NameAttribute(NameOID.ORGANIZATION_NAME, "Harness plant QA"),
        ]
    )
    start = dt.datetime(2026, 1, 1, tzinfo=dt.UTC)
    cert = (
        x509.CertificateBuilder()
        .subject_name(name)
        .issuer_name(name)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(start)
        .not_valid_after(start + dt.timedelta(days=3650))
        .add_extension(x509.BasicConstraints(ca=True, path_length=None), critical=True)
        .add_extension(
            x509.KeyUsage(
                digital_signature=True,
                content_commitment=True,
                key_encipherment=False,
                data_encipherment=False,
                key_agreement=False,
                key_cert_sign=True,
                crl_sign=False,
                encipher_only=False,
                decipher_only=False,
            ),
            critical=True,
        )
        .sign(key, hashes.SHA256())
    )
    enc = (
        serialization.BestAvailableEncryption(passphrase)
        if passphrase
        else serialization.NoEncryption()
    )
    p12 = folder / f"{common_name.split()[0].lower()}.p12"
    pem = p12.with_suffix(".pem")
    p12.write_bytes(pkcs12.serialize_key_and_certificates(b"signer", key, cert, None, enc))
    pem.write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    return p12, pem


_CACHE: dict[str, Path] = {}


def built_report(tmp_path_factory, name: str) -> Path:  # type: ignore[no-untyped-def]
    """A built report PDF, once per test session: "a" = LUG-CHECK rev1, "b" = LUG-AUDIT rev1 (other data), "c" = LUG-CHECK rev2."""
    if name not in _CACHE:
        base = tmp_path_factory.mktemp(f"built-{name}")
        if name == "a":
            study = study_files(base / "study")
        elif name == "c":  # the requalification a year later: L3 now misses one more defect
            study = study_files(base / "study", "LUG-CHECK", 2, date="2027-11-10", flip=1)
        else:
            study = study_files(base / "study", "LUG-AUDIT", 1, date="2026-11-18", flip=3)
        rev = build(study, base / "output")
        _CACHE[name] = next(rev.glob("*.pdf"))
    return _CACHE[name]
