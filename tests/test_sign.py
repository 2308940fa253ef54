"""``reportgen sign`` with pyHanko, and the signature checks of ``verify``."""

from __future__ import annotations

import datetime as dt
import os
import subprocess
import sys
from pathlib import Path

import pytest
from _built import attachments_of, built_report, self_signed_p12

from reportgen.errors import ExistsError, InputError
from reportgen.sign import check_signatures, sign_report
from reportgen.verify import verify_report

pytestmark = [
    pytest.mark.slow,
    pytest.mark.render,
    pytest.mark.filterwarnings(
        "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
    ),
]


@pytest.fixture(scope="module")
def report(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return built_report(tmp_path_factory, "a")


@pytest.fixture(scope="module")
def keys(tmp_path_factory: pytest.TempPathFactory) -> dict[str, tuple[Path, Path]]:
    folder = tmp_path_factory.mktemp("keys")
    return {
        "ines": self_signed_p12(folder),
        "other": self_signed_p12(folder, common_name="Otto Other"),
    }


def _cli(*args: str, env: dict[str, str] | None = None) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "reportgen", *args],
        capture_output=True,
        text=True,
        timeout=300,
        env={**os.environ, **(env or {})},
    )


def test_sign_keeps_the_report_and_verify_reads_the_signature(
    report: Path, keys: dict, tmp_path: Path
) -> None:
    p12, pem = keys["ines"]
    before = dt.datetime.now(dt.UTC).replace(microsecond=0)
    r = _cli(
        "sign",
        str(report),
        "--key",
        str(p12),
        "--passphrase-env",
        "SIGNER_PASS",
        "-o",
        str(tmp_path / "s.pdf"),
        env={"SIGNER_PASS": "s3cret"},
    )
    assert r.returncode == 0, r.stderr
    signed = (tmp_path / "s.pdf").read_bytes()
    original = report.read_bytes()
    assert (
        signed[: len(original)] == original
    )  # an incremental update: the report's bytes are untouched
    assert attachments_of(tmp_path / "s.pdf") == attachments_of(report)

    [sig] = check_signatures(signed)
    assert sig.signer == "Organization: Harness plant QA, Common Name: Ines Caro"
    assert (sig.intact, sig.valid, sig.whole_file, sig.trusted) == (True, True, True, False)
    assert sig.signed_at is not None
    when = dt.datetime.fromisoformat(sig.signed_at.replace("Z", "+00:00"))
    assert (
        before - dt.timedelta(seconds=5)
        <= when
        <= dt.datetime.now(dt.UTC) + dt.timedelta(seconds=5)
    )

    v = verify_report(tmp_path / "s.pdf", trust=(pem,))
    assert v.ok, v.format()
    [finding] = [f for f in v.findings if f.check == "signature"]
    assert finding.message == (
        f"signed by Organization: Harness plant QA, Common Name: Ines Caro at {sig.signed_at}; "
        "intact, covers the whole file; certificate trusted"
    )
    # without --trust the report is still genuine, and the signer is named for the reader to judge
    assert verify_report(tmp_path / "s.pdf").ok


def test_signature_by_someone_else_fails_with_trust(
    report: Path, keys: dict, tmp_path: Path
) -> None:
    out = sign_report(report, key=keys["other"][0], passphrase=b"s3cret", output=tmp_path / "o.pdf")
    v = verify_report(out, trust=(keys["ines"][1],))
    [finding] = [f for f in v.findings if f.check == "signature"]
    assert not finding.ok and finding.message.endswith(
        "not signed by a certificate given with --trust"
    )
    assert "Common Name: Otto Other" in finding.message
    # an unsigned report cannot satisfy --trust either
    assert not verify_report(report, trust=(keys["ines"][1],)).ok


def test_changes_after_signing_are_caught(report: Path, keys: dict, tmp_path: Path) -> None:
    signed = sign_report(
        report, key=keys["ines"][0], passphrase=b"s3cret", output=tmp_path / "s.pdf"
    ).read_bytes()
    # a changed byte inside the signed range (the middle of the report: stream data)
    at = len(report.read_bytes()) // 2
    flipped = bytearray(signed)
    flipped[at] ^= 0x01
    (tmp_path / "flipped.pdf").write_bytes(bytes(flipped))
    [sig] = check_signatures(bytes(flipped))
    assert not sig.intact
    v = verify_report(tmp_path / "flipped.pdf")
    [finding] = [f for f in v.findings if f.check == "signature"]
    assert (
        not v.ok
        and not finding.ok
        and "is BROKEN: the signed bytes were changed after signing" in finding.message
    )

    # content appended after the signature
    (tmp_path / "appended.pdf").write_bytes(signed + b"\n% appended after signing\n")
    v = verify_report(tmp_path / "appended.pdf")
    [finding] = [f for f in v.findings if f.check == "signature"]
    assert not finding.ok and finding.message.endswith(
        "does NOT cover the whole file: content was added after signing"
    )
    r = _cli("verify", str(tmp_path / "appended.pdf"))
    assert r.returncode == 1 and "failed: signature" in r.stderr


def test_sign_refusals(report: Path, keys: dict, tmp_path: Path) -> None:
    p12 = keys["ines"][0]
    with pytest.raises(InputError, match="passphrase"):
        sign_report(report, key=p12, passphrase=b"wrong", output=tmp_path / "x.pdf")
    with pytest.raises(InputError, match="--passphrase-env"):
        sign_report(report, key=p12, passphrase=None, output=tmp_path / "x.pdf")
    assert not (tmp_path / "x.pdf").exists()
    (tmp_path / "taken.pdf").write_bytes(b"keep me")
    with pytest.raises(ExistsError, match="never overwritten"):
        sign_report(report, key=p12, passphrase=b"s3cret", output=tmp_path / "taken.pdf")
    assert (tmp_path / "taken.pdf").read_bytes() == b"keep me"
    r = _cli(
        "sign",
        str(report),
        "--key",
        str(p12),
        "--passphrase-env",
        "NOT_SET_ANYWHERE_X",
        "-o",
        str(tmp_path / "y.pdf"),
    )
    assert r.returncode == 2 and "NOT_SET_ANYWHERE_X is not set" in r.stderr
    r = _cli("sign", str(report), "--key", str(tmp_path / "nokey.p12"))
    assert r.returncode == 2 and "the key file does not exist" in r.stderr
    # default output name: beside the report
    copy = tmp_path / "R-rev1.pdf"
    copy.write_bytes(report.read_bytes())
    assert sign_report(copy, key=p12, passphrase=b"s3cret") == tmp_path / "R-rev1-signed.pdf"
