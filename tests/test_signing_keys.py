"""Signing from the README: PKCS#12 or PEM key and certificate, errors that name the problem,
the README's openssl commands, and signed copies of archived reports (append-only, indexed)."""

from __future__ import annotations

import datetime as dt
import json
import os
import re
import shutil
import subprocess
from pathlib import Path

import pytest

from reportgen.errors import InputError
from reportgen.signkey import read_key_and_certificate
from tests import _built

ROOT = Path(__file__).resolve().parent.parent


def _pem_pair(
    folder: Path,
    *,
    name: str = "signer",
    passphrase: bytes | None = None,
    start: dt.datetime | None = None,
    days: int = 365,
) -> tuple[Path, Path]:
    """A self-signed EC key (PEM) and certificate (PEM)."""
    from cryptography import x509
    from cryptography.hazmat.primitives import hashes, serialization
    from cryptography.hazmat.primitives.asymmetric import ec
    from cryptography.x509.oid import NameOID

    key = ec.generate_private_key(ec.SECP256R1())
    subject = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "Tomas Brel")])
    start = start or dt.datetime.now(dt.UTC) - dt.timedelta(days=1)
    cert = (
        x509.CertificateBuilder()
        .subject_name(subject)
        .issuer_name(subject)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(start)
        .not_valid_after(start + dt.timedelta(days=days))
        .sign(key, hashes.SHA256())
    )
    enc = (
        serialization.BestAvailableEncryption(passphrase)
        if passphrase
        else serialization.NoEncryption()
    )
    folder.mkdir(parents=True, exist_ok=True)
    k = folder / f"{name}.key"
    c = folder / f"{name}.pem"
    k.write_bytes(
        key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8, enc)
    )
    c.write_bytes(cert.public_bytes(serialization.Encoding.PEM))
    return k, c


def _error(excinfo: pytest.ExceptionInfo[InputError]) -> str:
    return str(excinfo.value)


def test_pem_key_with_certificate_beside_or_inside(tmp_path: Path) -> None:
    k, c = _pem_pair(tmp_path)
    _, cert, _ = read_key_and_certificate(k, c, None)
    assert "Tomas Brel" in cert.subject.rfc4514_string()
    both = tmp_path / "both.pem"
    both.write_bytes(k.read_bytes() + c.read_bytes())
    read_key_and_certificate(both, None, None)


@pytest.mark.parametrize(
    ("case", "message"),
    [
        ("no-cert", "a PEM private key without its certificate"),
        ("needs-pass", "the private key is protected by a passphrase"),
        ("wrong-pass", "wrong passphrase for the private key"),
        ("expired", "the certificate expired on "),
        ("not-yet", "the certificate is not valid before "),
        ("other-cert", "the certificate does not belong to this private key"),
        ("garbage", "neither a PKCS#12 file (.p12/.pfx) nor a PEM key"),
        ("cert-as-key", "this PEM file holds no private key (found: CERTIFICATE)"),
        ("p12-no-pass", "the PKCS#12 file is protected by a passphrase"),
        ("p12-wrong", "wrong passphrase for the PKCS#12 file"),
    ],
)
def test_key_problems_are_named(tmp_path: Path, case: str, message: str) -> None:
    k, c = _pem_pair(tmp_path / "ok")
    args: tuple[Path, Path | None, bytes | None] = (k, c, None)
    if case == "no-cert":
        args = (k, None, None)
    elif case in ("needs-pass", "wrong-pass"):
        ek, ec_ = _pem_pair(tmp_path / "enc", passphrase=b"right")
        args = (ek, ec_, None if case == "needs-pass" else b"wrong")
    elif case == "expired":
        old = dt.datetime(2020, 1, 1, tzinfo=dt.UTC)
        args = (*_pem_pair(tmp_path / "old", start=old, days=30), None)
    elif case == "not-yet":
        later = dt.datetime.now(dt.UTC) + dt.timedelta(days=30)
        args = (*_pem_pair(tmp_path / "later", start=later), None)
    elif case == "other-cert":
        _, other = _pem_pair(tmp_path / "other")
        args = (k, other, None)
    elif case == "garbage":
        junk = tmp_path / "junk.p12"
        junk.write_bytes(b"\x00\x01 not a key")
        args = (junk, None, None)
    elif case == "cert-as-key":
        args = (c, None, None)
    elif case in ("p12-no-pass", "p12-wrong"):
        (tmp_path / "p12").mkdir()
        p12, _ = _built.self_signed_p12(tmp_path / "p12")
        args = (p12, None, None if case == "p12-no-pass" else b"nope")
    with pytest.raises(InputError) as exc:
        read_key_and_certificate(*args)
    assert message in _error(exc)


@pytest.mark.render
def test_readme_openssl_commands_make_keys_that_sign(tmp_path: Path, run_cli) -> None:
    """The commands of the README's sign section, run as written (openssl is a system package)."""
    openssl = shutil.which("openssl")
    assert openssl, "openssl is listed in system/packages.tsv for this test"
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    block = text.split("A key to try signing with", 1)[1].split("```sh\n", 1)[1].split("```", 1)[0]
    commands = [
        c.replace("\\\n", " ") for c in re.split(r"(?<!\\)\n", block) if c.startswith("openssl")
    ]
    assert len(commands) == 2
    env = {**os.environ, "SIGNER_PASS": "pa55"}
    for cmd in commands:
        cmd = cmd.split("#", 1)[0]
        subprocess.run(cmd, shell=True, check=True, cwd=tmp_path, env=env, capture_output=True)
    folder = _built.build(_built.study_files(tmp_path / "lug"), tmp_path / "out")
    pdf = folder / "LUG-CHECK-rev1.pdf"
    code, out, err = run_cli(
        "sign", pdf, "--key", tmp_path / "ines-caro.key", "--cert", tmp_path / "ines-caro.pem",
        "-o", tmp_path / "a.pdf",
    )  # fmt: skip
    assert code == 0, err
    os.environ["SIGNER_PASS"] = "pa55"
    try:
        code, out, err = run_cli(
            "sign", pdf, "--key", tmp_path / "ines-caro.p12", "--passphrase-env", "SIGNER_PASS",
            "-o", tmp_path / "b.pdf",
        )  # fmt: skip
    finally:
        del os.environ["SIGNER_PASS"]
    assert code == 0, err
    code, out, err = run_cli("verify", tmp_path / "b.pdf", "--trust", tmp_path / "ines-caro.pem")
    assert code == 0, out + err
    assert "signed by" in out and "Ines Caro" in out


@pytest.mark.render
def test_signing_an_archived_revision_adds_an_indexed_copy(tmp_path: Path, run_cli) -> None:
    from reportgen.archive import is_read_only
    from reportgen.signedcopy import signed_copies

    k, c = _pem_pair(tmp_path / "keys")
    lug = _built.study_files(tmp_path / "lug")
    arch = tmp_path / "archive"
    code, _, err = run_cli(
        "build", lug, "-o", tmp_path / "out", "--generated-at", "2026-11-20T09:00:00Z",
        "--archive", arch, "-q",
    )  # fmt: skip
    assert code == 0, err
    original = arch / "LUG-CHECK" / "rev1" / "LUG-CHECK-rev1.pdf"
    before = original.read_bytes()
    code, out, err = run_cli("sign", original, "--key", k, "--cert", c, "--json")
    assert code == 0, err
    copy = Path(json.loads(out)["signed"])
    assert copy == arch / "LUG-CHECK" / "signed" / "LUG-CHECK-rev1-signed-1.pdf"
    assert is_read_only(copy) and copy.read_bytes().startswith(before)
    assert original.read_bytes() == before  # the archived original stays as it is
    # a second signature is a second copy, never an overwrite
    code, out, err = run_cli("sign", original, "--key", k, "--cert", c, "--archive", arch, "-q")
    assert code == 0, err
    rows = signed_copies(arch, "LUG-CHECK", 1)
    assert [r["file"] for r in rows] == [
        "LUG-CHECK/signed/LUG-CHECK-rev1-signed-1.pdf",
        "LUG-CHECK/signed/LUG-CHECK-rev1-signed-2.pdf",
    ]
    assert all(r["signer"] and "Tomas Brel" in r["signer"] for r in rows)
    import sqlite3

    with sqlite3.connect(arch / "index.sqlite") as conn, pytest.raises(sqlite3.DatabaseError):
        conn.execute("DELETE FROM signed_copies")
    # verify and history show it
    code, out, err = run_cli("verify", original)
    assert code == 0, out + err
    assert f"note  signed copy in the archive: {copy}" in out
    code, out, err = run_cli("verify", copy)
    assert code == 0, out + err
    assert f"this is the indexed signed copy of {original}" in out
    code, out, err = run_cli("history", "--archive", arch, "--json")
    assert code == 0, err
    (row,) = json.loads(out)["revisions"]
    assert row["signed"] == [r["file"] for r in rows]
    code, out, err = run_cli("history", "--archive", arch)
    assert "signed: LUG-CHECK rev1: LUG-CHECK/signed/LUG-CHECK-rev1-signed-1.pdf" in out
    # the archive's own re-check still finds every archived file intact
    code, out, err = run_cli("verify", "--archive", arch)
    assert code == 0, out + err
    # -o is refused for an archived report; a PDF outside the named archive too
    code, _, err = run_cli("sign", original, "--key", k, "--cert", c, "-o", tmp_path / "x.pdf")
    assert code == 2 and "leave out -o" in err
    built = tmp_path / "out" / "LUG-CHECK" / "rev1" / "LUG-CHECK-rev1.pdf"
    code, _, err = run_cli("sign", built, "--key", k, "--cert", c, "--archive", arch)
    assert code == 2 and "not a report inside the archive" in err
