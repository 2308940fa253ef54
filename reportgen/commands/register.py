"""``reportgen register``: which inspector is certified for what, and until when."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import click

from . import archive_option, json_option, quiet_option


def _date(ctx: click.Context, param: click.Parameter, value: str | None) -> dt.date | None:
    if value is None:
        return None
    try:
        return dt.date.fromisoformat(value)
    except ValueError:
        raise click.BadParameter(f"{value!r} is not a date; write it as YYYY-MM-DD") from None


@click.command("register")
@archive_option()
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
    "-o",
    "--output",
    "outputs",
    type=click.Path(path_type=Path, dir_okay=False),
    multiple=True,
    help="Also write the register to FILE.csv, FILE.html or FILE.pdf (by its ending); repeatable.",
)
@click.option("--csv", "csv_path", type=click.Path(path_type=Path, dir_okay=False), hidden=True)
@click.option("--html", "html_path", type=click.Path(path_type=Path, dir_okay=False), hidden=True)
@click.option(
    "--fail-on",
    type=click.Choice(["expired", "due"]),
    default=None,
    help="Exit 1 when any certification is expired ('due': due or expired).",
)
@json_option("the register")
@quiet_option()
def command(
    archive_dir: Path | None,
    as_of: dt.date | None,
    due_within: int | None,
    characteristic: str | None,
    station: str | None,
    outputs: tuple[Path, ...],
    csv_path: Path | None,
    html_path: Path | None,
    fail_on: str | None,
    as_json: bool,
    quiet: bool,
) -> None:
    """List every inspector per characteristic with the latest certification outcome,
    certified-on, valid-until and status: valid, due, expired or not certified."""
    from ..archive import write_output
    from ..errors import CheckFailed, InputError
    from ..outputs import refuse_inside_archive, refuse_special
    from ..places import archive_location, require_archive
    from ..register import FAIL_ON, format_table, load_register, to_csv, to_html

    formats = {".csv": "csv", ".html": "html", ".htm": "html", ".pdf": "pdf"}
    targets = [(t, formats.get(t.suffix.lower())) for t in outputs]
    targets += [(p, f) for p, f in ((csv_path, "csv"), (html_path, "html")) if p is not None]
    for t, fmt in targets:  # before any work: nothing is written when one is refused
        refuse_special(t)
        refuse_inside_archive(t, "the register")
        if fmt is None:
            raise InputError.single(
                t, "the register is written as .csv, .html or .pdf", key="--output"
            )
    root = archive_location(archive_dir)
    require_archive(root)
    day = as_of or dt.datetime.now(dt.UTC).date()
    reg = load_register(
        root, as_of=day, due_within=due_within, characteristic=characteristic, station=station
    )
    if as_json:
        import json

        from ..register import csv_rows

        rows = csv_rows(reg, safe=False)  # JSON is data: names exactly as given
        click.echo(json.dumps({"as_of": day.isoformat(), "rows": rows}, indent=2))
    elif not quiet:
        click.echo(format_table(reg), nl=False)
    for t, fmt in targets:
        if fmt == "csv":
            write_output(t, to_csv(reg).encode("utf-8"), what="the register")
        elif fmt == "pdf":
            from ..render.pdf import render_pdf

            when = dt.datetime.combine(day, dt.time(0, 0), tzinfo=dt.UTC)
            write_output(t, render_pdf(to_html(reg), generated_at=when), what="the register")
        else:
            write_output(t, to_html(reg).encode("utf-8"), what="the register")
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
