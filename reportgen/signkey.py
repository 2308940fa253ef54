"""The signer's key and certificate for ``reportgen sign``: PKCS#12, or PEM key and certificate.

Read with the ``cryptography`` library (imported inside the functions), so that every problem is
named for what it is: a file that is neither format, a missing or wrong passphrase, a key and a
certificate that do not belong together, a certificate that has expired or is not valid yet.
The key is then handed to pyHanko, which makes the signature.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

from .errors import InputError

PASS_HINT = "give the passphrase with --passphrase-env VAR (the name of the variable holding it)"


def _fail(path: Path, message: str, hint: str | None = None, *, key: str = "--key") -> InputError:
    return InputError.single(path, message, hint=hint, key=key)


def _pem_blocks(data: bytes) -> set[str]:
    import re

    return {m.decode() for m in re.findall(rb"-----BEGIN ([A-Z0-9 ]+)-----", data)}


def _pem_key(path: Path, data: bytes, passphrase: bytes | None) -> Any:
    from cryptography.hazmat.primitives.serialization import load_pem_private_key

    try:
        return load_pem_private_key(data, password=passphrase)
    except TypeError as exc:
        if passphrase is None:
            raise _fail(path, "the private key is protected by a passphrase", PASS_HINT) from None
        raise _fail(path, f"the private key is not protected, but a passphrase was given ({exc})",
                    "leave out --passphrase-env") from None  # fmt: skip
    except ValueError as exc:
        if passphrase is not None and "decrypt" in str(exc).lower():
            raise _fail(path, "wrong passphrase for the private key", PASS_HINT) from None
        raise _fail(path, f"cannot read the PEM private key: {exc}") from None


def _pem_cert(path: Path, data: bytes, *, key: str) -> Any:
    from cryptography import x509

    try:
        return x509.load_pem_x509_certificate(data)
    except ValueError as exc:
        raise _fail(path, f"cannot read the PEM certificate: {exc}", key=key) from None


def read_key_and_certificate(
    key: Path, cert: Path | None, passphrase: bytes | None
) -> tuple[Any, Any, list[Any]]:
    """(private key, certificate, other certificates) from the files, or InputError naming why."""
    from cryptography.hazmat.primitives.serialization import pkcs12

    if not key.is_file():
        raise _fail(key, "the key file does not exist")
    if cert is not None and not cert.is_file():
        raise _fail(cert, "the certificate file does not exist", key="--cert")
    data = key.read_bytes()
    blocks = _pem_blocks(data)
    if blocks:  # PEM: a private key, and the certificate in the same file or in --cert
        if not any("PRIVATE KEY" in b for b in blocks):
            raise _fail(
                key,
                "this PEM file holds no private key (found: " + ", ".join(sorted(blocks)) + ")",
                "give the private key with --key and the certificate with --cert",
            )
        private = _pem_key(key, data, passphrase)
        if cert is not None:
            certificate = _pem_cert(cert, cert.read_bytes(), key="--cert")
        elif "CERTIFICATE" in blocks:
            certificate = _pem_cert(key, data, key="--key")
        else:
            raise _fail(
                key,
                "a PEM private key without its certificate",
                "give the certificate with --cert FILE, or put both in one PEM file",
            )
        extra: list[Any] = []
    else:
        if cert is not None:
            raise _fail(cert, "--cert goes with a PEM private key; a PKCS#12 file holds its own",
                        key="--cert")  # fmt: skip
        try:
            private, certificate, extra_certs = pkcs12.load_key_and_certificates(data, passphrase)
        except ValueError as exc:
            text = str(exc).lower()
            if "password" in text or "mac" in text or "decrypt" in text:
                if passphrase is None:
                    raise _fail(
                        key, "the PKCS#12 file is protected by a passphrase", PASS_HINT
                    ) from None
                raise _fail(key, "wrong passphrase for the PKCS#12 file", PASS_HINT) from None
            raise _fail(
                key,
                f"neither a PKCS#12 file (.p12/.pfx) nor a PEM key: {exc}",
                "give a PKCS#12 file, or a PEM private key with --cert for its certificate",
            ) from None
        except TypeError:
            raise _fail(key, "the PKCS#12 file is protected by a passphrase", PASS_HINT) from None
        if private is None or certificate is None:
            raise _fail(key, "the PKCS#12 file must hold both the private key and its certificate")
        extra = list(extra_certs or [])
    _check_pair(key, private, certificate)
    _check_dates(cert or key, certificate)
    return private, certificate, extra


def _check_pair(path: Path, private: Any, certificate: Any) -> None:
    from cryptography.hazmat.primitives.serialization import Encoding, PublicFormat

    def spki(k: Any) -> bytes:
        return k.public_bytes(Encoding.DER, PublicFormat.SubjectPublicKeyInfo)

    if spki(private.public_key()) != spki(certificate.public_key()):
        raise _fail(path, "the certificate does not belong to this private key")


def _check_dates(path: Path, certificate: Any, now: dt.datetime | None = None) -> None:
    now = now or dt.datetime.now(dt.UTC)
    after = certificate.not_valid_after_utc
    before = certificate.not_valid_before_utc
    if after < now:
        raise _fail(
            path,
            f"the certificate expired on {after:%Y-%m-%d} ({after:%H:%M} UTC)",
            "renew the certificate; a signature made with it would not be trusted",
        )
    if before > now:
        raise _fail(path, f"the certificate is not valid before {before:%Y-%m-%d %H:%M} UTC")


def load_signer(key: Path, cert: Path | None, passphrase: bytes | None) -> Any:
    """A pyHanko signer for the key and certificate (PKCS#12, or PEM key + certificate)."""
    from asn1crypto import keys as asn1_keys
    from asn1crypto import x509 as asn1_x509
    from cryptography.hazmat.primitives.serialization import (
        Encoding,
        NoEncryption,
        PrivateFormat,
    )
    from pyhanko.sign.signers import SimpleSigner
    from pyhanko_certvalidator.registry import SimpleCertificateStore

    private, certificate, extra = read_key_and_certificate(key, cert, passphrase)
    der_key = private.private_bytes(Encoding.DER, PrivateFormat.PKCS8, NoEncryption())
    signing_cert = asn1_x509.Certificate.load(certificate.public_bytes(Encoding.DER))
    others = [asn1_x509.Certificate.load(c.public_bytes(Encoding.DER)) for c in extra]
    return SimpleSigner(
        signing_cert=signing_cert,
        signing_key=asn1_keys.PrivateKeyInfo.load(der_key),
        cert_registry=SimpleCertificateStore.from_certs([signing_cert, *others]),
    )
