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

from . import json_option, progress_printer, quiet_option, study_argument


def _round_items(study: Path) -> Path | None:
    """The latest round's ``items.csv`` (the default item list of ``--round``), or None."""
    from ..rounds import find_rounds
    from ..study import load_study

    loaded = load_study(study, require_inputs=False)
    rounds = find_rounds(loaded.path, loaded.id)
    for n in sorted(rounds.files, reverse=True):
        candidate = rounds.files[n].parent / "items.csv"
        if candidate.is_file():
            return candidate
    return None


def in_study_folder(study: object) -> Path | None:
    """``<study folder>/plan`` when the study's key is ``plan/key/key.csv`` there, else None."""
    key = getattr(study, "key_path", None)
    path = getattr(study, "path", None)
    if key is None or path is None:
        return None
    folder = Path(path).resolve().parent / "plan"
    return folder if Path(key).resolve() == folder / "key" / "key.csv" else None


@click.command("plan")
@study_argument()
@click.option(
    "--items",
    "items_file",
    type=click.Path(dir_okay=False, path_type=Path),
    default=None,
    help="Item list: CSV with columns item,reference and optionally borderline (yes/no).",
)
@click.option(
    "-o",
    "--output",
    "output",
    type=click.Path(file_okay=False, path_type=Path),
    default=None,
    help="Folder under which <study-id>/plan/ is written (default: the study folder's plan/ when "
    "the study definition says key: plan/key/key.csv, else output).",
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
@click.option(
    "--round",
    "round_",
    metavar="next|N",
    default=None,
    help="Plan a round of the study (a requalification): 'next' starts a new round in "
    "STUDY/round<N>/ (its own study definition, item list, plan and key) without touching an "
    "earlier round's files. --items defaults to the latest round's items.csv.",
)
@json_option("the plan summary and advice")
@quiet_option()
def command(
    study: Path,
    items_file: Path | None,
    output: Path | None,
    seed: int | None,
    start: dt.datetime | None,
    no_pdf: bool,
    advise: bool,
    agreement: float,
    target: float | None,
    runs: int,
    round_: str | None,
    as_json: bool,
    quiet: bool,
) -> None:
    """Write blind, randomised run sheets for a study, or advise on its size."""
    if round_ is not None and output is not None:
        raise click.UsageError("--round writes into the study folder; leave out -o/--output")
    if round_ is not None and items_file is None:
        items_file = _round_items(study)
    if items_file is None and not advise:
        raise click.UsageError(
            "give --items items.csv to write run sheets, or --advise for the sample-size advice"
        )

    from ..plan import load_items, make_plan, plan_settings, summary_text, write_plan
    from ..study import load_study

    study_file = study
    study = load_study(study_file, require_inputs=False)  # planned before the first rating
    progress = progress_printer(quiet, log=not as_json)
    new_round: int | None = None
    if round_ is not None:
        from ..rounds import choose_round, find_rounds

        rounds = find_rounds(study.path, study.id)
        n = choose_round(rounds, round_)
        if n in rounds.files:
            study = load_study(rounds.files[n], require_inputs=False)
        else:
            new_round = n
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
    if new_round is not None and items_file is not None:
        from ..rounds import start_round

        made: list[object] = []

        def write(round_study: object, folder: Path) -> None:
            its = load_items(items_file, round_study)
            st = plan_settings(round_study, seed=seed, start=start.date() if start else None)
            made.append(make_plan(round_study, its, st))
            write_plan(
                made[0],
                round_study,
                output_dir=Path("output"),
                folder=folder,
                pdf=not no_pdf,
                advice=adv.as_dict() if adv is not None else None,
                progress=progress,
            )

        day = (start.date() if start else dt.datetime.now(dt.UTC).date()).isoformat()
        where = start_round(rounds, new_round, items_file=items_file, date=day, write=write)
        plan = made[0]
        folder = where / "plan"
        out["round"] = {"round": new_round, "folder": str(where)}
        out["plan"] = {**plan.summary, "folder": str(folder)}
        if not quiet and not as_json:
            click.echo(summary_text(plan), nl=False)
            click.echo(f"\nStarted round {new_round} in {where}; earlier rounds are untouched.")
            click.echo(f"Wrote the plan into {folder}")
            click.echo(f"Keep {folder / 'key'} away from the raters.")
            click.echo(
                f"Next: fill in {folder / 'ratings-entry.csv'}, then run: "
                f"reportgen build {where} --archive"
            )
        items = None
    if items is not None:
        plan = make_plan(study, items, settings)
        folder = write_plan(
            plan,
            study,
            output_dir=output or Path("output"),
            folder=in_study_folder(study) if output is None else None,
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
