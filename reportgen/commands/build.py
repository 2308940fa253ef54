"""``reportgen build STUDY.yaml``: the audit-ready report (HTML, PDF/A-3b, results.json, charts).

Only click is imported here; the render stack (Jinja2, matplotlib, WeasyPrint) is imported
inside the command, so ``reportgen --help`` and ``reportgen check`` stay fast.
"""

from __future__ import annotations

import time
from pathlib import Path

import click

from ..errors import ExitCode, ReportgenError
from . import archive_option, json_option, progress_printer, quiet_option, study_argument


class StrictWarnings(ReportgenError):
    """Warnings were raised and --strict was given."""

    exit_code = ExitCode.STRICT


@click.command("build")
@study_argument()
@click.option(
    "-o",
    "--output",
    "output",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("output"),
    show_default=True,
    help="Folder the report is written into, as <output>/<study-id>/rev<N>/.",
)
@click.option(
    "--replace",
    is_flag=True,
    help="Rebuild an existing revision folder as a DRAFT (marked on every page).",
)
@click.option(
    "--generated-at",
    "generated_at",
    metavar="ISO-TIME",
    default=None,
    help="Build time printed in the report and the PDF metadata (default: SOURCE_DATE_EPOCH, else now). "
    "The same inputs and the same time give byte-identical files.",
)
@click.option("--strict", is_flag=True, help="Fail (exit 4) when the analysis raises any warning.")
@click.option(
    "--no-pdf", "no_pdf", is_flag=True, help="Write the HTML, charts and results.json only."
)
@archive_option(
    type=str,  # "" (the flag alone) means: find the archive by the rule
    is_flag=False,
    flag_value="",
    help="After building, copy the revision into the archive and index it (as `reportgen archive`); "
    "DIR is optional (default: $REPORTGEN_ARCHIVE, else the nearest archive/ holding an index in "
    "this folder or a parent, else ./archive). Not with --replace: drafts are not archived.",
)
@click.option(
    "--archive-dir",
    "archive_dir_old",
    type=click.Path(file_okay=False, path_type=Path),
    default=None,
    hidden=True,
    help="Old spelling of --archive DIR.",
)
@json_option("what was written (study, revision, verdict, files, archive folder)")
@quiet_option()
def command(
    study: Path,
    output: Path,
    replace: bool,
    generated_at: str | None,
    strict: bool,
    no_pdf: bool,
    archive_dir: str | Path | None,
    archive_dir_old: Path | None,
    as_json: bool,
    quiet: bool,
) -> None:
    """Build the report of STUDY: HTML and PDF/A-3b with charts, results.json beside them."""
    if archive_dir_old is not None:
        if archive_dir is None:
            raise click.UsageError("--archive-dir is used only together with --archive.")
        archive_dir = archive_dir_old
    archive = archive_dir is not None
    if archive and replace:
        raise click.UsageError(
            "--archive cannot be used with --replace: a draft is not archived. Raise "
            "study.revision in the study definition and build again with --archive."
        )
    if archive and no_pdf:
        raise click.UsageError(
            "--archive cannot be used with --no-pdf: the archive keeps the report PDF."
        )
    from ..ratings import load_ratings
    from ..render.build import (
        build_report,
        compute_results,
        refuse_archive_target,
        resolve_generated_at,
        revision_dir,
    )
    from ..study import load_study

    start = time.perf_counter()
    progress = progress_printer(quiet, log=not as_json) or (lambda msg: None)

    when = resolve_generated_at(generated_at)
    progress("reading the study")
    study = load_study(study)
    from ..outputs import check_output_folder

    check_output_folder(output)
    target = revision_dir(output, study)
    refuse_archive_target(target)
    if target.exists():
        from ..render.build import refuse_foreign_files, write_folder

        if not replace:
            write_folder(target, {}, replace=False)  # raises ExistsError
        refuse_foreign_files(target)
    progress("reading ratings")
    ratings = load_ratings(study)
    results = compute_results(study, ratings, progress=progress)
    warnings = results.get("warnings") or []
    if strict and warnings:
        lines = [
            f"{w.get('measure')}: {w.get('message')}" if isinstance(w, dict) else str(w)
            for w in warnings
        ]
        raise StrictWarnings(
            f"{len(warnings)} warning(s) and --strict was given; nothing was written:\n  "
            + "\n  ".join(lines)
        )
    folder = build_report(
        study,
        output_dir=output,
        generated_at=when,
        replace=replace,
        progress=progress,
        pdf=not no_pdf,
        ratings=ratings,
        results=results,
    )
    archived_in: Path | None = None
    if archive:
        from ..archive import archive_revision
        from ..places import archive_location, require_archive

        root = archive_location(Path(archive_dir) if archive_dir else None)
        require_archive(root, writing=True)
        progress("archiving")
        try:
            entry = archive_revision(folder, archive_dir=root, progress=progress)
        except ReportgenError:
            click.echo(
                f"{study.id} revision {study.revision}: the report was built in {folder}, "
                "but it could not be archived:",
                err=True,
            )
            raise
        archived_in = root / entry.folder
    verdict = results.get("verdict") or {}
    outcome = verdict.get("outcome") if isinstance(verdict, dict) else verdict
    if as_json:
        import json

        click.echo(
            json.dumps(
                {
                    "study": study.id,
                    "revision": study.revision,
                    "verdict": outcome,
                    "draft": replace,
                    "folder": str(folder),
                    "files": [str(p) for p in sorted(folder.iterdir())],
                    "archived_in": str(archived_in) if archived_in is not None else None,
                    "warnings": len(warnings),
                },
                indent=2,
            )
        )
    elif not quiet:
        click.echo(
            f"{study.id} revision {study.revision}: {outcome or 'no verdict'}{' (DRAFT)' if replace else ''}"
        )
        for p in sorted(folder.iterdir()):
            click.echo(f"  wrote {p}")
        if archived_in is not None:
            click.echo(f"  archived in {archived_in}")
        if warnings:
            click.echo(f"  {len(warnings)} warning(s): see the data integrity section", err=True)
        click.echo(f"  took {time.perf_counter() - start:.1f} s", err=True)
