"""``reportgen register``: which inspector is certified for what, and until when."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import click


def _date(ctx: click.Context, param: click.Parameter, value: str | None) -> dt.date | None:
    if value is None:
        return None
    try:
        return dt.date.fromisoformat(value)
    except ValueError:
        raise click.BadParameter(f"{value!r} is not a date; write it as YYYY-MM-DD") from None


@click.command("register")
@click.option(
    "--archive",
    "archive_dir",
    type=click.Path(path_type=Path, file_okay=False),
    default=None,
    help="Archive folder (default: $REPORTGEN_ARCHIVE, else ./archive).",
)
@click.option(
    "--as-of",
    "as_of",
    callback=_date,
    metavar="DATE",
    help="Day the status is for (default: today, UTC).",
)
@click.option(
    "--due-within",
    type=click.IntRange(min=0),
    default=None,
    metavar="DAYS",
    help="A certification ending within DAYS is 'due' (default: each study's due window, 30 days unless set).",
)
@click.option("--characteristic", default=None, help="Only this characteristic.")
@click.option("--station", default=None, help="Only this inspection station.")
@click.option(
    "--csv",
    "csv_path",
    type=click.Path(path_type=Path, dir_okay=False),
    help="Also write the register as CSV.",
)
@click.option(
    "--html",
    "html_path",
    type=click.Path(path_type=Path, dir_okay=False),
    help="Also write a printable HTML page.",
)
@click.option(
    "--fail-on",
    type=click.Choice(["expired", "due"]),
    default=None,
    help="Exit 1 when any certification is expired ('due': due or expired).",
)
@click.option("-q", "--quiet", is_flag=True, help="Do not print the table.")
def command(
    archive_dir: Path | None,
    as_of: dt.date | None,
    due_within: int | None,
    characteristic: str | None,
    station: str | None,
    csv_path: Path | None,
    html_path: Path | None,
    fail_on: str | None,
    quiet: bool,
) -> None:
    """List every inspector per characteristic with the latest certification outcome,
    certified-on, valid-until and status: valid, due, expired or not certified."""
    from ..archive import resolve_archive_dir, write_output
    from ..errors import CheckFailed
    from ..outputs import refuse_inside_archive, refuse_special
    from ..register import FAIL_ON, format_table, load_register, to_csv, to_html

    root = resolve_archive_dir(archive_dir)
    for path in (csv_path, html_path):  # before any work: nothing is written when one is refused
        if path is not None:
            refuse_special(path)
            refuse_inside_archive(path, "the register")
    day = as_of or dt.datetime.now(dt.UTC).date()
    reg = load_register(
        root, as_of=day, due_within=due_within, characteristic=characteristic, station=station
    )
    if not quiet:
        click.echo(format_table(reg), nl=False)
    if csv_path is not None:
        write_output(csv_path, to_csv(reg).encode("utf-8"), what="the register")
    if html_path is not None:
        write_output(html_path, to_html(reg).encode("utf-8"), what="the register")
    from ..archive import list_entries
    from ..archivecheck import check_archive_files

    check_archive_files(root, list_entries(root, characteristic=characteristic, station=station))
    if fail_on:
        hits = reg.matching(FAIL_ON[fail_on])
        if hits:
            names = "; ".join(f"{h.inspector} ({h.characteristic}): {h.status}" for h in hits)
            raise CheckFailed(
                f"{len(hits)} certification(s) {'due or expired' if fail_on == 'due' else 'expired'}: {names}"
            )
