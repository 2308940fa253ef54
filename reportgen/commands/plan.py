"""``reportgen plan STUDY.yaml``: blind, randomised run sheets and sample-size advice.

* ``--items items.csv`` writes the plan folder ``<output>/<study-id>/plan/`` (run sheets, the
  data-entry file, the key kept apart, the plan summary); an existing plan is never overwritten.
* ``--advise`` prints the sample-size advice (with or without an item list); with ``--items``
  the advice is also stored in the plan summary.

Only click is imported at module level; the planner, numpy, Jinja2 and WeasyPrint are imported
inside the command.
"""

from __future__ import annotations

import datetime as dt
import json
from pathlib import Path

import click

from . import progress_printer


@click.command("plan")
@click.argument("study_file", metavar="STUDY.yaml", type=click.Path(dir_okay=False, path_type=Path))
@click.option(
    "--items",
    "items_file",
    type=click.Path(dir_okay=False, path_type=Path),
    default=None,
    help="Item list: CSV with columns item,reference and optionally borderline (yes/no).",
)
@click.option(
    "--output",
    "output",
    type=click.Path(file_okay=False, path_type=Path),
    default=Path("output"),
    show_default=True,
    help="Folder under which <study-id>/plan/ is written.",
)
@click.option(
    "--seed",
    type=click.IntRange(min=0),
    default=None,
    help="Seed for labels and orders (default: the study's plan.seed).",
)
@click.option(
    "--start",
    type=click.DateTime(formats=["%Y-%m-%d"]),
    default=None,
    help="Planned date of the first trial, YYYY-MM-DD (default: plan.start, else today).",
)
@click.option("--no-pdf", is_flag=True, help="Write the run sheets as CSV and HTML only (faster).")
@click.option(
    "--advise", is_flag=True, help="Print the sample-size advice (works without --items)."
)
@click.option(
    "--agreement",
    type=click.FloatRange(min=0.0, max=1.0, min_open=True, max_open=True),
    default=0.8,
    show_default=True,
    help="Assumed agreement for the advice: kappa of a rater against the reference.",
)
@click.option(
    "--target",
    type=click.FloatRange(min=0.0, min_open=True, max=1.0),
    default=None,
    help="Target half-width of the interval (default: the study's target_half_width).",
)
@click.option(
    "--runs",
    type=click.IntRange(min=20),
    default=200,
    show_default=True,
    help="Simulated studies per item count in the advice.",
)
@click.option("--json", "as_json", is_flag=True, help="Print the plan summary and advice as JSON.")
@click.option("-q", "--quiet", is_flag=True, help="Print nothing but errors.")
def command(
    study_file: Path,
    items_file: Path | None,
    output: Path,
    seed: int | None,
    start: dt.datetime | None,
    no_pdf: bool,
    advise: bool,
    agreement: float,
    target: float | None,
    runs: int,
    as_json: bool,
    quiet: bool,
) -> None:
    """Write blind, randomised run sheets for a study, or advise on its size."""
    if items_file is None and not advise:
        raise click.UsageError(
            "give --items items.csv to write run sheets, or --advise for the sample-size advice"
        )

    from ..plan import load_items, make_plan, plan_settings, summary_text, write_plan
    from ..study import load_study

    study = load_study(study_file, require_inputs=False)  # planned before the first rating
    progress = progress_printer(quiet)
    items = load_items(items_file, study) if items_file is not None else None
    settings = plan_settings(study, seed=seed, start=start.date() if start else None)

    adv = None
    if advise:
        from ..advice import advise as make_advice

        adv = make_advice(
            study,
            items=items,
            agreement=agreement,
            target=target,
            runs=runs,
            seed=settings.seed,
            progress=progress,
        )

    out: dict[str, object] = {}
    if items is not None:
        plan = make_plan(study, items, settings)
        folder = write_plan(
            plan,
            study,
            output_dir=output,
            pdf=not no_pdf,
            advice=adv.as_dict() if adv is not None else None,
            progress=progress,
        )
        out["plan"] = {**plan.summary, "folder": str(folder)}
        if not quiet and not as_json:
            click.echo(summary_text(plan), nl=False)
            click.echo(f"\nWrote the plan into {folder}")
            click.echo(f"Keep {folder / 'key'} away from the raters.")
    if adv is not None:
        out["advice"] = adv.as_dict()
        if not quiet and not as_json:
            from ..advice import format_advice

            if items is not None:
                click.echo("")
            click.echo(format_advice(adv), nl=False)
    if as_json:
        click.echo(json.dumps(out, indent=2, allow_nan=False, default=str))
