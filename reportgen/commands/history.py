"""``reportgen history``: trend of the archived studies across requalifications."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import click

from . import archive_option, json_option, quiet_option


def _when(ctx: click.Context, param: click.Parameter, value: str | None) -> dt.datetime | None:
    if value is None:
        return None
    try:
        t = dt.datetime.fromisoformat(value.replace("Z", "+00:00"))
    except ValueError:
        raise click.BadParameter(
            f"{value!r} is not a time; write e.g. 2026-11-20T10:00:00Z"
        ) from None
    return t if t.tzinfo else t.replace(tzinfo=dt.UTC)


@click.command("history")
@archive_option()
@click.option("--characteristic", default=None, help="Only studies of this characteristic.")
@click.option("--station", default=None, help="Only studies at this inspection station.")
@click.option(
    "-o",
    "--output",
    type=click.Path(path_type=Path, dir_okay=False),
    default=None,
    help="Write the trend report to FILE.html or FILE.pdf (default: a summary on the terminal).",
)
@click.option(
    "--generated-at",
    callback=_when,
    metavar="TIME",
    help="Time printed in the report (default: now, UTC).",
)
@json_option("the archived revisions and the series")
@quiet_option()
def command(
    archive_dir: Path | None,
    characteristic: str | None,
    station: str | None,
    output: Path | None,
    generated_at: dt.datetime | None,
    as_json: bool,
    quiet: bool,
) -> None:
    """Trend of the main figures and per-inspector figures across archived studies, with intervals,
    marking changes of the item set, and a table of every archived study with its verdict."""
    from ..archive import write_output
    from ..archivecheck import check_archive_files
    from ..errors import InputError
    from ..history import format_text, load_history, render_history_html, render_history_pdf
    from ..outputs import refuse_inside_archive, refuse_special
    from ..places import archive_location, require_archive

    root = archive_location(archive_dir)
    require_archive(root)
    if output is not None:
        refuse_special(output, key="--output")
        refuse_inside_archive(output, "the trend report")
    entries, series = load_history(root, characteristic=characteristic, station=station)
    if as_json:
        from ..rounds import history_json

        click.echo(history_json(entries, series))
    elif output is None and not quiet:
        click.echo(format_text(entries, series), nl=False)
    if output is None:
        check_archive_files(root, entries)
        return
    suffix = output.suffix.lower()
    if suffix not in (".html", ".htm", ".pdf"):
        raise InputError.single(
            output, "the trend report is written as .html or .pdf", key="--output"
        )
    when = generated_at or dt.datetime.now(dt.UTC).replace(microsecond=0)
    html = render_history_html(
        entries,
        series,
        generated_at=when,
        filters={"characteristic": characteristic, "station": station},
    )
    data = render_history_pdf(html, generated_at=when) if suffix == ".pdf" else html.encode("utf-8")
    write_output(output, data, what="the trend report")
    if not quiet and not as_json:
        click.echo(f"wrote {output} ({len(entries)} archived revision(s), {len(series)} series)")
    check_archive_files(root, entries)
