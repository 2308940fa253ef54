"""``reportgen init DIR``: write a commented study definition and empty ratings templates.

Existing files are never overwritten (exit 5).  Once the blanks are filled in, the folder
passes ``reportgen check DIR/study.yaml``.
"""

from __future__ import annotations

import re
from pathlib import Path

import click

from . import json_option, quiet_option

SCALES = ("binary", "nominal", "ordinal")
DEFAULT_CATEGORIES = {
    "binary": "OK=Conforming,NC=Nonconforming",
    "nominal": "T1=Type 1,T2=Type 2,T3=Type 3",
    "ordinal": "G1=Grade 1 (best),G2=Grade 2,G3=Grade 3",
}
FILES = ("study.yaml", "ratings.csv", "reference.csv")


def _split_list(value: str, what: str) -> list[str]:
    parts = [p.strip() for p in value.split(",")]
    if not value.strip() or any(not p for p in parts):
        raise click.BadParameter(f"give a comma-separated list of {what}, without empty entries")
    return parts


def _categories(value: str, scale: str) -> list[tuple[str, str]]:
    out: list[tuple[str, str]] = []
    for part in _split_list(value, "category codes"):
        code, _, label = part.partition("=")
        code, label = code.strip(), label.strip() or code.strip()
        if not code:
            raise click.BadParameter(f"{part!r} has no code before '='")
        out.append((code, label))
    codes = [c for c, _ in out]
    if len(set(codes)) != len(codes):
        raise click.BadParameter("category codes must differ")
    if len(out) < 2:
        raise click.BadParameter("at least 2 categories are needed")
    if scale == "binary" and len(out) != 2:
        raise click.BadParameter(
            "a binary study has exactly 2 categories (conforming first, nonconforming second)"
        )
    return out


def _q(text: str) -> str:
    """A YAML double-quoted string."""
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


DIRECT_INPUTS = """\
ratings: ratings.csv            # long layout item,rater,trial,rating (paths relative to this file)
reference: reference.csv        # item,reference: the agreed correct category of each item
# key: plan/key/key.csv         # optional: ratings carry coded labels, decoded with this key"""

PLAN_INPUTS = """\
ratings: plan/ratings-entry.csv # written by `reportgen plan`; fill in the rating column
reference: items.csv            # item,reference,borderline: fill in the reference column
key: plan/key/key.csv           # written by `reportgen plan`; keep it away from the raters"""


def study_yaml(
    *,
    study_id: str,
    scale: str,
    categories: list[tuple[str, str]],
    raters: list[str],
    trials: int,
    plan: bool = False,
) -> str:
    """The commented study definition written by ``init`` (``plan``: for the run-sheet path)."""
    inputs = PLAN_INPUTS if plan else DIRECT_INPUTS
    cats = "\n".join(f"  - {{code: {_q(c)}, label: {_q(label)}}}" for c, label in categories)
    rater_lines = "\n".join(f"  - {{id: {_q(r)}, name: {_q('Name of ' + r)}}}" for r in raters)
    if scale == "binary":
        defect = f"defect_category: {_q(categories[-1][0])}   # the nonconforming category (required for binary)"
    else:
        defect = (
            f"# defect_category: {_q(categories[-1][0])}   # optional: the nonconforming category"
        )
    order = (
        "order matters: first = best" if scale == "ordinal" else "order is only the display order"
    )
    first_steps = (
        "Fill in the reference column of items.csv, then run\n"
        "#   reportgen plan . --items items.csv      (run sheets and the key, into plan/)"
        if plan
        else "Fill in ratings.csv and reference.csv, then run\n#   reportgen check study.yaml"
    )
    return f"""\
# Study definition written by `reportgen init`.  {first_steps}
# Every key is described in the README ("Study definition reference").

study:
{f"  id: {_q(study_id)}":<31} # letters, digits, - _ . (used in folder names)
  title: "Title of the study"   # shown at the top of the report
  purpose: "Why the study is run"   # optional
  characteristic: "What is judged"  # optional, e.g. surface finish
  station: "Where it is judged"     # optional, e.g. final inspection, line 3
  revision: 1                   # whole number from 1; raise it to correct this round's report
  # a repeated study (requalification) is a new round: reportgen plan STUDY --round next
  # date: 2026-01-31            # optional: date of the study (YYYY-MM-DD)
  safety_related: false         # true: the report carries the safety caution prominently

scale: {scale}                  # binary | nominal | ordinal
categories:                     # {order}
{cats}
{defect}

raters:                         # one entry per person; ids as used in the ratings file
{rater_lines}
{f"trials: {trials}":<31} # blind passes of each rater over all items

{inputs}
missing: refuse                 # refuse | allow: what to do with absent ratings

confidence: 0.95                # interval level, between 0.5 and 1
interval: clopper-pearson       # proportion interval: clopper-pearson | wilson
bootstrap: {{resamples: 2000, seed: 1}}   # resamples 0 = analytic intervals only
weights: linear                 # ordinal weighted measures: linear | quadratic | k x k matrix
target_half_width: 0.10         # planning figure: wanted half-width of the agreement interval
size_words: landis-koch-1977    # words for kappa sizes: landis-koch-1977 | fleiss-1981 (README)

# Acceptance criteria (see the README, "Acceptance criteria and certification"):
# criteria:
#   source: "Company procedure, revision"
#   rules:
#     - {{measure: reproducibility.fleiss_kappa, pass: 0.75, marginal: 0.40, judge: lower_bound}}

# Inspector certification (per rater figures; same README section):
# certification:
#   source: "Inspector qualification procedure, revision"
#   valid_months: 12
#   rules:
#     - {{measure: repeatability.agreement, pass: 0.90, judge: estimate}}

# signoff: {{prepared_by: "", reviewed_by: "", approved_by: ""}}
# report: {{paper: A4}}          # A4 | letter
# plan: {{seed: 7}}              # used by `reportgen plan`
# measured_reference: {{file: values.csv, unit: mm, lower_limit: 9.98, upper_limit: 10.02}}  # item,value file; see README
"""


def ratings_template(*, items: list[str], raters: list[str], trials: int) -> str:
    """Long-layout ratings CSV with every item, rater and trial, and blank ratings."""
    rows = ["item,rater,trial,rating"]
    rows += [f"{i},{r},{t}," for r in raters for t in range(1, trials + 1) for i in items]
    return "\n".join(rows) + "\n"


def items_template(*, items: list[str]) -> str:
    """The item list of the plan path: ids, and blank reference and borderline columns."""
    return "\n".join(["item,reference,borderline", *(f"{i},," for i in items)]) + "\n"


def reference_template(*, items: list[str]) -> str:
    return "\n".join(["item,reference", *(f"{i}," for i in items)]) + "\n"


@click.command("init")
@click.argument("folder", metavar="STUDY", type=click.Path(file_okay=False, path_type=Path))
@click.option(
    "--scale",
    type=click.Choice(SCALES),
    default="ordinal",
    show_default=True,
    help="Kind of categories.",
)
@click.option(
    "--categories",
    help="Comma-separated codes, each optionally CODE=Label (default depends on --scale).",
)
@click.option("--raters", default="R1,R2,R3", show_default=True, help="Comma-separated rater ids.")
@click.option(
    "--trials",
    type=click.IntRange(1, 20),
    default=3,
    show_default=True,
    help="Blind passes per rater.",
)
@click.option(
    "--item-count",
    "n_items",
    type=click.IntRange(1, 100_000),
    default=30,
    show_default=True,
    metavar="N",
    help="Number of items.",
)
@click.option("--items", "n_items_old", type=click.IntRange(1, 100_000), hidden=True)
@click.option("--id", "study_id", help="Study id (default: from the folder name).")
@click.option(
    "--plan",
    "plan_path",
    is_flag=True,
    help="Start on the run-sheet path: items.csv (ids, blank reference and borderline) instead "
    "of blank ratings; then `reportgen plan` writes the run sheets and the key into STUDY/plan/.",
)
@json_option("the files written")
@quiet_option()
def command(
    folder: Path,
    scale: str,
    categories: str | None,
    raters: str,
    trials: int,
    n_items: int,
    n_items_old: int | None,
    study_id: str | None,
    plan_path: bool,
    as_json: bool,
    quiet: bool,
) -> None:
    """Start a new study in the folder STUDY: a commented study.yaml and blank ratings and
    reference CSVs (with --plan: the item list for `reportgen plan`).

    Refuses to overwrite existing files (exit 5).
    """
    if n_items_old is not None:
        n_items = n_items_old
    from ..errors import ExistsError, InputError

    cats = _categories(categories or DEFAULT_CATEGORIES[scale], scale)
    rater_ids = _split_list(raters, "rater ids")
    if len(set(rater_ids)) != len(rater_ids):
        raise click.BadParameter("rater ids must differ", param_hint="--raters")
    if any("/" in r or "," in r for r in rater_ids):
        raise click.BadParameter("rater ids must not contain '/'", param_hint="--raters")
    from ..study import MAX_STUDY_ID

    if study_id is None:
        study_id = (
            re.sub(r"[^A-Za-z0-9._-]+", "-", folder.resolve().name)[:MAX_STUDY_ID].strip("-.")
            or "study"
        )
    elif not re.match(r"^[A-Za-z0-9][A-Za-z0-9._-]*$", study_id):
        raise click.BadParameter("letters, digits, '-', '_' and '.' only", param_hint="--id")
    elif len(study_id) > MAX_STUDY_ID:
        raise click.BadParameter(f"at most {MAX_STUDY_ID} characters", param_hint="--id")
    width = max(3, len(str(n_items)))
    items = [f"{i:0{width}d}" for i in range(1, n_items + 1)]
    contents = {
        "study.yaml": study_yaml(
            study_id=study_id,
            scale=scale,
            categories=cats,
            raters=rater_ids,
            trials=trials,
            plan=plan_path,
        )
    }
    if plan_path:
        contents["items.csv"] = items_template(items=items)
    else:
        contents["ratings.csv"] = ratings_template(items=items, raters=rater_ids, trials=trials)
        contents["reference.csv"] = reference_template(items=items)
    existing = [folder / name for name in (*FILES, "items.csv", "plan") if (folder / name).exists()]
    if existing:
        raise ExistsError(
            f"{', '.join(str(p) for p in existing)} already exist(s); init never overwrites files"
        )
    written: list[Path] = []
    try:
        folder.mkdir(parents=True, exist_ok=True)
        for name, text in contents.items():
            target = folder / name
            with open(target, "x", encoding="utf-8", newline="\n") as fh:
                written.append(target)
                fh.write(text)
    except FileExistsError as exc:
        for p in written:
            p.unlink()
        if str(exc.filename) not in {str(folder / name) for name in contents}:  # mkdir met a file
            raise InputError.single(
                folder, f"cannot create the folder: {exc.filename} is a file"
            ) from None
        raise ExistsError(f"{exc.filename} already exists; init never overwrites files") from None
    except OSError as exc:
        for p in written:
            p.unlink(missing_ok=True)
        blocker = next((p for p in (folder, *folder.parents) if p.exists()), None)
        why = (
            f"{blocker} is a file, not a folder"
            if blocker and not blocker.is_dir()
            else (exc.strerror or str(exc))
        )
        raise InputError.single(folder, f"cannot write the study here: {why}") from None
    if plan_path:
        nxt = f"reportgen plan {folder} --items {folder / 'items.csv'}"
        what = f"{folder / 'study.yaml'}, {folder / 'items.csv'} ({n_items} items, blank reference)"
        advice = f"fill in the reference column of items.csv, then run: {nxt}"
    else:
        nxt = f"reportgen check {folder}"
        what = (
            f"{folder / 'study.yaml'}, {folder / 'ratings.csv'} "
            f"({n_items * len(rater_ids) * trials} blank ratings), {folder / 'reference.csv'}"
        )
        advice = f"fill in the blanks, then run: {nxt}"
    if as_json:
        import json

        click.echo(json.dumps({"written": [str(p) for p in written], "next": nxt}, indent=2))
    elif not quiet:
        click.echo(f"wrote {what}")
        click.echo(f"next: {advice}")
