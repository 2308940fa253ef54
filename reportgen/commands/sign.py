"""``reportgen sign``: add a standard PDF digital signature to a report (pyHanko)."""

from __future__ import annotations

import os
from pathlib import Path

import click

from . import json_option, quiet_option


@click.command("sign")
@click.argument("report", type=click.Path(path_type=Path, dir_okay=False))
@click.option(
    "--key",
    required=True,
    type=click.Path(path_type=Path, dir_okay=False),
    help="The signer's certificate and private key as a PKCS#12 file (.p12 / .pfx).",
)
@click.option(
    "--passphrase-env",
    metavar="VAR",
    default=None,
    help="Name of the environment variable that holds the key file's passphrase.",
)
@click.option(
    "-o",
    "--output",
    type=click.Path(path_type=Path, dir_okay=False),
    default=None,
    help="Signed PDF to write (default: REPORT-signed.pdf beside the report; never overwritten).",
)
@click.option(
    "--reason",
    default=None,
    help="Reason recorded in the signature (default: sign-off of the report).",
)
@click.option("--location", default=None, help="Place of signing recorded in the signature.")
@json_option("the signed file")
@quiet_option()
def command(
    report: Path,
    key: Path,
    passphrase_env: str | None,
    output: Path | None,
    reason: str | None,
    location: str | None,
    as_json: bool,
    quiet: bool,
) -> None:
    """Sign a report PDF (for example to sign off inspector certification).

    The signature is added as an incremental update: the report's own bytes are kept unchanged
    in front of it, and `reportgen verify` checks the signature along with everything else.
    """
    from ..errors import InputError
    from ..sign import DEFAULT_REASON, sign_report

    passphrase = None
    if passphrase_env:
        value = os.environ.get(passphrase_env)
        if value is None:
            raise InputError.single(
                "--passphrase-env",
                f"the environment variable {passphrase_env} is not set",
                key="--passphrase-env",
            )
        passphrase = value.encode("utf-8")
    out = sign_report(
        report,
        key=key,
        passphrase=passphrase,
        output=output,
        reason=reason or DEFAULT_REASON,
        location=location,
    )
    if as_json:
        import json

        click.echo(json.dumps({"report": str(report), "signed": str(out)}, indent=2))
    elif not quiet:
        click.echo(f"signed {report} -> {out}")
