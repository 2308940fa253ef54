"""Planning a study: blind, randomised run sheets, a data-entry file and the key.

``reportgen plan STUDY.yaml --items items.csv`` turns an item list (``item,reference`` and an
optional ``borderline`` column) into everything a study needs before the first rating:

* one **run sheet** per rater and trial (CSV, HTML and PDF): every item appears under a coded
  label, in an order of its own; the sheet shows the rater, the trial, the planned date, the
  categories with blank answer boxes and short instructions — never an item id or a reference;
* a **data-entry file** (``ratings-entry.csv``) in the ratings format ``item,rater,trial,rating``
  whose ``item`` column holds the coded labels, ready to be filled in;
* the **key** (``key/key.csv``, header ``label,item,trial``), which maps the labels back to the
  items and trials; it sits in its own folder with a warning file, because it must not reach
  the raters; the ratings loader decodes the filled-in file with it (study option ``key:``);
* a **plan summary** (``plan.json`` and ``plan.txt``): seed, planned dates, the gap between
  trials, design figures and how order and blinding were done.

Everything is drawn from one seeded generator (study ``plan: {seed: …}`` or ``--seed``), so the
same inputs give the same plan.  Every rater/trial order differs from every other, and no label
is used twice (labels are unique across all trials).  The plan folder is written to a temporary
sibling and renamed into place; an existing plan is never overwritten.

Only numpy and the standard library are imported at module level; Jinja2 and WeasyPrint are
imported inside the functions that need them.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import json
import math
import os
import shutil
import tempfile
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .errors import ExistsError, InputError, ProblemCollector
from .model import Study

PLAN_SCHEMA = "reportgen-plan/1"
#: keys the study's ``plan:`` mapping may hold
PLAN_KEYS = ("seed", "gap_days", "start")
#: gap between trials when the study does not set one (common practice, no source: long
#: enough that raters no longer remember their earlier calls)
DEFAULT_GAP_DAYS = 7
#: letters and digits used in labels: no 0/O, 1/I/L, 2/Z, 5/S, 8/B look-alikes
LABEL_LETTERS = "ACDEFHJKMNPRTUVWXY"
LABEL_DIGITS = "34679"
KEY_WARNING_NAME = "KEEP-FROM-RATERS.txt"
KEY_WARNING = """\
THIS FOLDER HOLDS THE KEY OF THE STUDY PLAN. DO NOT GIVE IT TO THE RATERS.

key.csv maps every coded label on the run sheets back to the item and the trial it stands
for. A rater who sees it knows which item is which, and the study is no longer blind.
Keep it with the person who runs the study. After the ratings are entered, point the study
definition at it (key: <path to key.csv>) so that reportgen can decode the labels.
"""

_TRUE = {"yes", "y", "true", "1", "x"}
_FALSE = {"no", "n", "false", "0", ""}


# --------------------------------------------------------------------------- data


@dataclass(frozen=True)
class PlanItem:
    """One item of the item list, with its line in the file."""

    item: str
    reference: str | None  # category code; None: not given (studies without a reference)
    borderline: bool | None  # None: the list has no borderline column
    line: int


@dataclass(frozen=True)
class PlanSettings:
    seed: int
    gap_days: int
    start: dt.date
    seed_source: str  # "command line" | "study definition" | "drawn"
    gap_source: str  # "study definition" | "default"


@dataclass(frozen=True)
class SheetRow:
    order: int  # 1-based position on the sheet
    label: str
    item: str  # kept for the key and the tests; never written to a sheet


@dataclass(frozen=True)
class RunSheet:
    rater: str
    rater_name: str
    trial: int
    date: dt.date
    rows: tuple[SheetRow, ...]

    @property
    def stem(self) -> str:
        return f"{_safe_name(self.rater)}-trial-{self.trial}"


@dataclass(frozen=True)
class Plan:
    """A complete plan, computed before anything is written."""

    study_id: str
    study_title: str
    revision: int
    settings: PlanSettings
    items: tuple[PlanItem, ...]
    categories: tuple[tuple[str, str, str | None], ...]  # (code, label, description)
    sheets: tuple[RunSheet, ...]
    key: tuple[tuple[str, str, int], ...]  # (label, item, trial), sorted by trial then label
    trial_dates: tuple[dt.date, ...]
    label_length: int
    summary: dict[str, Any] = field(default_factory=dict)

    def label_of(self, item: str, trial: int) -> str:
        for label, it, t in self.key:
            if it == item and t == trial:
                return label
        raise KeyError((item, trial))


# --------------------------------------------------------------------------- settings


def plan_settings(
    study: Study,
    *,
    seed: int | None = None,
    start: dt.date | None = None,
    today: dt.date | None = None,
) -> PlanSettings:
    """Seed, gap and start date from the command line, else the study's ``plan:``, else defaults.

    Problems in ``plan:`` are reported with the study file's line and column.
    """
    raw = study.plan
    problems = ProblemCollector()
    values: dict[str, Any] = {}
    if raw is not None:
        if not isinstance(raw, dict):
            loc = study.locate("plan")
            problems.add(
                loc.path,
                "must be a mapping of seed, gap_days, start",
                line=loc.line,
                column=loc.column,
                key="plan",
            )
        else:
            for k, v in raw.items():
                loc = study.locate("plan", k)
                if k not in PLAN_KEYS:
                    problems.add(
                        loc.path,
                        f"unknown key {k!r}",
                        line=loc.line,
                        column=loc.column,
                        key=f"plan.{k}",
                        hint=f"known keys: {', '.join(PLAN_KEYS)}",
                    )
                elif k in ("seed", "gap_days"):
                    if isinstance(v, bool) or not isinstance(v, int) or v < 0:
                        problems.add(
                            loc.path,
                            f"must be a whole number of at least 0, got {v!r}",
                            line=loc.line,
                            column=loc.column,
                            key=f"plan.{k}",
                        )
                    else:
                        values[k] = v
                elif k == "start":
                    if isinstance(v, dt.datetime) or not isinstance(v, dt.date):
                        problems.add(
                            loc.path,
                            f"must be a date (YYYY-MM-DD), got {v!r}",
                            line=loc.line,
                            column=loc.column,
                            key="plan.start",
                        )
                    else:
                        values[k] = v
    problems.raise_if_any()

    if seed is not None:
        the_seed, seed_source = int(seed), "command line"
    elif "seed" in values:
        the_seed, seed_source = int(values["seed"]), "study definition"
    else:
        the_seed, seed_source = int(np.random.SeedSequence().entropy % (2**31)), "drawn"
    if "gap_days" in values:
        gap, gap_source = int(values["gap_days"]), "study definition"
    else:
        gap, gap_source = DEFAULT_GAP_DAYS, "default"
    first = start or values.get("start") or today or dt.date.today()
    return PlanSettings(
        seed=the_seed, gap_days=gap, start=first, seed_source=seed_source, gap_source=gap_source
    )


# --------------------------------------------------------------------------- item list


def _sniff_text(path: Path) -> str:
    data = path.read_bytes()
    if data.startswith(b"\xef\xbb\xbf"):
        data = data[3:]
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError:
        return data.decode("cp1252", errors="replace")


def load_items(path: str | Path, study: Study) -> tuple[PlanItem, ...]:
    """Read ``items.csv`` (``item,reference[,borderline]``) and check it against the study.

    All problems are collected (file, line, column name) and raised together as InputError.
    """
    p = Path(path)
    problems = ProblemCollector()
    if not p.is_file():
        raise InputError.single(
            p, "item list not found", hint="give a CSV with columns item,reference[,borderline]"
        )
    text = _sniff_text(p)
    if not text.strip():
        raise InputError.single(p, "the item list is empty", line=1)
    try:
        dialect = csv.Sniffer().sniff(text.splitlines()[0], delimiters=",;\t")
        delim = dialect.delimiter
    except csv.Error:
        delim = ","
    reader = csv.reader(io.StringIO(text), delimiter=delim)
    rows = [(reader.line_num, row) for row in reader]
    rows = [(n, [c.strip() for c in r]) for n, r in rows if any(c.strip() for c in r)]
    if not rows:
        raise InputError.single(p, "the item list is empty", line=1)
    head_line, header = rows[0]
    header = [h.lower() for h in header]
    while header and header[-1] == "":
        header.pop()
    needs_reference = study.reference_path is not None or study.defect_category is not None
    for need in ("item", "reference") if needs_reference else ("item",):
        if need not in header:
            raise InputError.single(
                p,
                f"column {need!r} is missing from the header",
                line=head_line,
                hint="the first row must name the columns: item,reference[,borderline]",
            )
    unknown = [h for h in header if h not in ("item", "reference", "borderline")]
    if unknown:
        raise InputError.single(
            p,
            f"unknown column {unknown[0]!r}",
            line=head_line,
            hint="the columns are item, reference and (optional) borderline",
        )
    i_item = header.index("item")
    i_ref = header.index("reference") if "reference" in header else None
    i_border = header.index("borderline") if "borderline" in header else None
    codes = study.category_codes
    seen: dict[str, int] = {}
    items: list[PlanItem] = []
    for line, row in rows[1:]:

        def cell(i: int, row: list[str] = row) -> str:
            return row[i] if i < len(row) else ""

        extra = [c for c in row[len(header) :] if c]
        if extra:
            problems.add(
                p, f"more cells than columns in the header ({len(row)} > {len(header)})", line=line
            )
            continue
        item = cell(i_item)
        ref: str | None = cell(i_ref) if i_ref is not None else ""
        if not item:
            problems.add(p, "item is blank", line=line, key="item")
            continue
        if item in seen:
            problems.add(
                p,
                f"item {item!r} is listed twice (first on line {seen[item]})",
                line=line,
                key="item",
            )
            continue
        seen[item] = line
        if not ref and not needs_reference:
            ref = None  # a study without a reference: the list need not give one
        elif ref not in codes:
            near = _nearest(ref, codes)
            problems.add(
                p,
                f"reference {ref!r} is not a category of the study"
                if ref
                else "reference is blank",
                line=line,
                key="reference",
                hint=(f"did you mean {near!r}? " if near else "")
                + f"categories: {', '.join(codes)}",
            )
            continue
        border: bool | None = None
        if i_border is not None:
            b = cell(i_border).lower()
            if b in _TRUE:
                border = True
            elif b in _FALSE:
                border = False
            else:
                problems.add(
                    p,
                    f"borderline must be yes or no, got {cell(i_border)!r}",
                    line=line,
                    key="borderline",
                )
                continue
        items.append(PlanItem(item=item, reference=ref, borderline=border, line=line))
    problems.raise_if_any()
    if not items:
        raise InputError.single(p, "the item list has a header but no items", line=head_line)
    return tuple(items)


def _nearest(word: str, choices: Sequence[str]) -> str | None:
    import difflib

    got = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.5)
    if got:
        return got[0]
    low = {c.lower(): c for c in choices}
    return low.get(word.lower())


# --------------------------------------------------------------------------- the plan


def _label_length(needed: int) -> int:
    """Characters per label so that the label space is at least 50 times the labels needed."""
    length = 4
    while _label_space(length) < 50 * needed:
        length += 1
    return length


def _label_space(length: int) -> int:
    n_letters = (length + 1) // 2
    n_digits = length // 2
    return len(LABEL_LETTERS) ** n_letters * len(LABEL_DIGITS) ** n_digits


def _label_text(index: int, length: int) -> str:
    """The ``index``-th label of the space: letters and digits alternate, letter first."""
    out = []
    for pos in range(length):
        alphabet = LABEL_LETTERS if pos % 2 == 0 else LABEL_DIGITS
        index, r = divmod(index, len(alphabet))
        out.append(alphabet[r])
    return "".join(out)


def _draw_labels(
    rng: np.random.Generator, count: int, forbidden: set[str]
) -> tuple[list[str], int]:
    length = _label_length(count + len(forbidden))
    space = _label_space(length)
    labels: list[str] = []
    taken: set[str] = set()
    while len(labels) < count:
        batch = rng.choice(space, size=min(space, 2 * (count - len(labels)) + 8), replace=False)
        for idx in batch:
            text = _label_text(int(idx), length)
            if text in taken or text.upper() in forbidden:
                continue
            taken.add(text)
            labels.append(text)
            if len(labels) == count:
                break
    return labels, length


def make_plan(study: Study, items: Sequence[PlanItem], settings: PlanSettings) -> Plan:
    """Draw labels and orders for every rater and trial (pure: nothing is written)."""
    n = len(items)
    n_sheets = len(study.raters) * study.trials
    if n < 2:
        raise InputError.single(study.path, "a plan needs at least 2 items")
    if n <= 8 and math.factorial(n) < n_sheets:
        raise InputError.single(
            study.path,
            f"{n} items allow only {math.factorial(n)} different orders, but {n_sheets} run sheets need one each",
            hint="add items, or plan fewer raters or trials",
        )
    sheet_names: dict[str, str] = {}
    for rater in study.raters:  # run sheet files are named after the rater id
        other = sheet_names.setdefault(_safe_name(rater.id).casefold(), rater.id)
        if other != rater.id:
            raise InputError.single(
                study.path,
                f"raters {other!r} and {rater.id!r} would get run sheet files of the same name "
                f"({_safe_name(rater.id)}-trial-1.csv)",
                key="raters",
                hint="give them ids that differ in letters or digits, not only in spaces, signs or case",
            )
    rng = np.random.default_rng(settings.seed)
    forbidden = {it.item.upper() for it in items} | {c.upper() for c in study.category_codes}
    labels, length = _draw_labels(rng, n * study.trials, forbidden)
    label_of: dict[tuple[int, int], str] = {}
    k = 0
    for t in range(1, study.trials + 1):
        for i in range(n):
            label_of[(i, t)] = labels[k]
            k += 1

    dates = tuple(
        settings.start + dt.timedelta(days=settings.gap_days * (t - 1))
        for t in range(1, study.trials + 1)
    )
    seen_orders: set[tuple[int, ...]] = set()
    sheets: list[RunSheet] = []
    for t in range(1, study.trials + 1):
        for rater in study.raters:
            for _attempt in range(1000):
                order = tuple(int(x) for x in rng.permutation(n))
                if order not in seen_orders:
                    break
            else:  # pragma: no cover - guarded by the factorial check above
                raise InputError.single(
                    study.path, "could not draw a different order for every run sheet"
                )
            seen_orders.add(order)
            rows = tuple(
                SheetRow(order=pos + 1, label=label_of[(i, t)], item=items[i].item)
                for pos, i in enumerate(order)
            )
            sheets.append(
                RunSheet(
                    rater=rater.id, rater_name=rater.name, trial=t, date=dates[t - 1], rows=rows
                )
            )
    key = tuple(
        sorted(
            (
                (label_of[(i, t)], items[i].item, t)
                for i in range(n)
                for t in range(1, study.trials + 1)
            ),
            key=lambda r: (r[2], r[0]),
        )
    )
    plan = Plan(
        study_id=study.id,
        study_title=study.title,
        revision=study.revision,
        settings=settings,
        items=tuple(items),
        categories=tuple((c.code, c.label, c.description) for c in study.categories),
        sheets=tuple(sheets),
        key=key,
        trial_dates=dates,
        label_length=length,
    )
    return _with_summary(plan, study)


def _with_summary(plan: Plan, study: Study) -> Plan:
    from dataclasses import replace

    n = len(plan.items)
    counts: dict[str, int] | None = {code: 0 for code, _, _ in plan.categories}
    for it in plan.items:
        if it.reference is not None and counts is not None:
            counts[it.reference] += 1
    if not any(it.reference is not None for it in plan.items):
        counts = None
    flags = [it.borderline for it in plan.items]
    has_flags = all(f is not None for f in flags)
    n_border = sum(1 for f in flags if f) if has_flags else None
    summary: dict[str, Any] = {
        "schema": PLAN_SCHEMA,
        "study": {"id": plan.study_id, "title": plan.study_title, "revision": plan.revision},
        "seed": plan.settings.seed,
        "seed_source": plan.settings.seed_source,
        "gap_days": plan.settings.gap_days,
        "gap_source": plan.settings.gap_source,
        "trial_dates": [
            {"trial": t, "date": d.isoformat()} for t, d in enumerate(plan.trial_dates, 1)
        ],
        "design": {
            "items": n,
            "raters": len(study.raters),
            "trials": study.trials,
            "run_sheets": len(plan.sheets),
            "ratings": n * len(study.raters) * study.trials,
            "categories": len(plan.categories),
            "scale": study.scale,
            "reference_counts": counts,
            "borderline_items": n_border,
            "borderline_share": (n_border / n) if n_border is not None else None,
        },
        "labels": {
            "count": len(plan.key),
            "characters": plan.label_length,
            "unique_across_trials": len({k[0] for k in plan.key}) == len(plan.key),
        },
        "blinding": (
            "Every item carries a coded label drawn at random for each trial; a label says nothing "
            "about the item, its reference or the trial, and no label is used twice. The key "
            "that maps labels to items is kept apart from the run sheets."
        ),
        "order": (
            "Each rater works through the items in an order of their own, drawn afresh for every "
            f"trial from a seeded random generator (seed {plan.settings.seed}); no two run sheets "
            "share an order."
        ),
        "gap": (
            f"Trials are planned {plan.settings.gap_days} day(s) apart"
            + (
                " (default; common practice, no source)"
                if plan.settings.gap_source == "default"
                else ""
            )
            + "."
        ),
    }
    return replace(plan, summary=summary)


# --------------------------------------------------------------------------- output


def _safe_name(text: str) -> str:
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in text) or "rater"


def _csv_bytes(rows: Sequence[Sequence[Any]]) -> bytes:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerows(rows)
    return buf.getvalue().encode("utf-8")


def sheet_csv(sheet: RunSheet) -> bytes:
    """The run sheet as CSV: ``order,label,rater,trial,rating`` with the rating left blank."""
    rows: list[list[Any]] = [["order", "label", "rater", "trial", "rating"]]
    rows += [[r.order, r.label, sheet.rater, sheet.trial, ""] for r in sheet.rows]
    return _csv_bytes(rows)


def entry_csv(plan: Plan) -> bytes:
    """The data-entry file: the ratings format with coded labels in the ``item`` column."""
    rows: list[list[Any]] = [["item", "rater", "trial", "rating"]]
    for sheet in plan.sheets:
        rows += [[r.label, sheet.rater, sheet.trial, ""] for r in sheet.rows]
    return _csv_bytes(rows)


def key_csv(plan: Plan) -> bytes:
    """The key: header ``label,item,trial`` (the contract the ratings loader reads)."""
    return _csv_bytes([["label", "item", "trial"], *plan.key])


def summary_text(plan: Plan) -> str:
    s = plan.summary
    d = s["design"]
    lines = [
        f"Study plan for {plan.study_id} (revision {plan.revision}): {plan.study_title}",
        "",
        f"Seed: {s['seed']} ({s['seed_source']})",
        f"Gap between trials: {s['gap_days']} day(s)"
        + (" (default)" if s["gap_source"] == "default" else ""),
    ]
    lines += [f"Trial {x['trial']}: planned for {x['date']}" for x in s["trial_dates"]]
    lines += [
        "",
        f"Items: {d['items']}   Raters: {d['raters']}   Trials: {d['trials']}   "
        f"Run sheets: {d['run_sheets']}   Ratings to collect: {d['ratings']}",
        "Items per reference category: "
        + (
            ", ".join(f"{c} {n}" for c, n in d["reference_counts"].items())
            if d["reference_counts"] is not None
            else "not given"
        ),
    ]
    if d["borderline_items"] is not None:
        lines.append(
            f"Borderline items: {d['borderline_items']} ({100 * d['borderline_share']:.0f} % of the items)"
        )
    lines += [
        f"Coded labels: {s['labels']['count']}, {s['labels']['characters']} characters each, none used twice",
        "",
        "Blinding: " + s["blinding"],
        "Order: " + s["order"],
        "Gap: " + s["gap"],
        "",
        "Files:",
        "  sheets/              run sheets for the raters (CSV, HTML, PDF)",
        "  ratings-entry.csv    data-entry file: fill in the rating column, one row per coded label",
        "  key/key.csv          the key; keep it from the raters (see key/"
        + KEY_WARNING_NAME
        + ")",
        "",
        "After the trials: copy this folder into the study folder as plan/, fill in",
        "plan/ratings-entry.csv, and set `ratings: plan/ratings-entry.csv` and",
        "`key: plan/key/key.csv` in the study definition; the report then finds this summary",
        "and states how order and blinding were done.",
    ]
    return "\n".join(lines) + "\n"


_INSTRUCTIONS = (
    "Work down the list in the order printed. Find the item that carries the label, look at it "
    "as you normally would at your station, and tick exactly one box.",
    "Decide on your own: do not talk about the items with other raters, and do not look back at "
    "earlier sheets.",
    "If you cannot decide, tick the box you would choose at work. Leave a row empty only if the "
    "item is missing, and write a short note.",
    "Hand the sheet back to the study lead when you are done.",
)


def sheet_context(plan: Plan, sheet: RunSheet, *, study: Study) -> dict[str, Any]:
    """Everything the run-sheet template may show (no item id, no reference)."""
    return {
        "study_id": plan.study_id,
        "study_title": plan.study_title,
        "revision": plan.revision,
        "station": study.station,
        "rater": sheet.rater,
        "rater_name": sheet.rater_name,
        "trial": sheet.trial,
        "trials": study.trials,
        "date": sheet.date.isoformat(),
        "categories": [
            {"code": c, "label": lab, "description": desc} for c, lab, desc in plan.categories
        ],
        "rows": [{"order": r.order, "label": r.label} for r in sheet.rows],
        "instructions": list(_INSTRUCTIONS),
        "paper": study.paper,
    }


def _template_dir() -> Path:
    """The built-in templates folder (top-level ``templates/`` in a checkout)."""
    try:
        from .render.environment import builtin_template_dir

        d = Path(builtin_template_dir())
        if (d / "plan_sheet.html").is_file():
            return d
    except Exception:  # noqa: BLE001 - the render package may not be there; fall back below
        pass
    here = Path(__file__).resolve().parent
    for cand in (here.parent / "templates", here / "templates"):
        if (cand / "plan_sheet.html").is_file():
            return cand
    try:
        import importlib.resources

        pkg = Path(str(importlib.resources.files("reportgen.templates")))
        if (pkg / "plan_sheet.html").is_file():
            return pkg
    except (ModuleNotFoundError, TypeError):
        pass
    raise FileNotFoundError("templates/plan_sheet.html not found")


def render_sheet_html(plan: Plan, sheet: RunSheet, *, study: Study) -> str:
    """The printable run sheet (HTML), from ``templates/plan_sheet.html``."""
    import jinja2

    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(_template_dir())),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
    )
    return env.get_template("plan_sheet.html").render(**sheet_context(plan, sheet, study=study))


def render_sheet_pdf(html: str, *, when: dt.date) -> bytes:
    """HTML → PDF with the project's locked-down WeasyPrint set-up (imported here only)."""
    stamp = dt.datetime(when.year, when.month, when.day, tzinfo=dt.UTC)
    try:
        from .render.environment import builtin_template_dir  # noqa: F401 - render_pdf needs it
        from .render.pdf import render_pdf
    except ModuleNotFoundError:
        render_pdf = None
    if render_pdf is not None:
        return bytes(render_pdf(html, generated_at=stamp))
    # The report's render stack is not there: the same lock-down, done here (data: and the
    # template folder's fonts only; WeasyPrint imported only now).
    import weasyprint

    from .errors import RenderError

    root = _template_dir().resolve()
    try:
        from .render.pdf import make_fetcher

        fetcher = make_fetcher(root)
    except ModuleNotFoundError:  # pragma: no cover - render.pdf absent as well
        fetcher = None
    try:
        doc = weasyprint.HTML(
            string=html, base_url=root.as_uri() + "/", url_fetcher=fetcher
        ).render()
        return bytes(doc.write_pdf())
    except Exception as exc:  # noqa: BLE001 - any render failure becomes a RenderError
        raise RenderError(
            f"run sheet PDF could not be rendered: {type(exc).__name__}: {exc}"
        ) from exc


def plan_folder(study: Study, output_dir: str | Path) -> Path:
    return Path(output_dir) / study.id / "plan"


def write_plan(
    plan: Plan,
    study: Study,
    *,
    output_dir: str | Path,
    pdf: bool = True,
    advice: dict[str, Any] | None = None,
    progress: Callable[[str], None] | None = None,
    folder: str | Path | None = None,
) -> Path:
    """Write the plan folder ``<output_dir>/<study-id>/plan`` atomically; refuse to overwrite.

    Everything is rendered into a temporary sibling folder first; only when every file is
    written is the folder renamed into place.  Raises ExistsError when a plan is already there.
    """
    from .outputs import refuse_inside_archive

    final = Path(folder) if folder is not None else plan_folder(study, output_dir)
    refuse_inside_archive(final, "a plan")
    if final.exists():
        raise ExistsError(
            f"{final}: a plan already exists; it is kept. Remove it or choose another --output folder."
        )
    final.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=".plan-", dir=final.parent))
    try:
        (tmp / "sheets").mkdir()
        (tmp / "key").mkdir()
        for n, sheet in enumerate(plan.sheets, 1):
            if progress:
                progress(f"run sheet {n}/{len(plan.sheets)}: {sheet.rater}, trial {sheet.trial}")
            _put(tmp / "sheets" / f"{sheet.stem}.csv", sheet_csv(sheet))
            html = render_sheet_html(plan, sheet, study=study)
            _put(tmp / "sheets" / f"{sheet.stem}.html", html.encode("utf-8"))
            if pdf:
                _put(tmp / "sheets" / f"{sheet.stem}.pdf", render_sheet_pdf(html, when=sheet.date))
        _put(tmp / "ratings-entry.csv", entry_csv(plan))
        _put(tmp / "key" / "key.csv", key_csv(plan))
        _put(tmp / "key" / KEY_WARNING_NAME, KEY_WARNING.encode("utf-8"))
        summary = dict(plan.summary)
        summary["files"] = {
            "run_sheets": [
                f"sheets/{s.stem}.{ext}"
                for s in plan.sheets
                for ext in (("csv", "html", "pdf") if pdf else ("csv", "html"))
            ],
            "entry": "ratings-entry.csv",
            "key": "key/key.csv",
        }
        if advice is not None:
            summary["advice"] = advice
        _put(
            tmp / "plan.json",
            (json.dumps(summary, indent=2, allow_nan=False) + "\n").encode("utf-8"),
        )
        _put(tmp / "plan.txt", summary_text(plan).encode("utf-8"))
        os.chmod(tmp, 0o755)
        if final.exists():
            raise ExistsError(f"{final}: a plan appeared while this one was written; it is kept.")
        os.rename(tmp, final)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return final


def _put(path: Path, data: bytes) -> None:
    with open(path, "wb") as fh:
        fh.write(data)
        fh.flush()
        os.fsync(fh.fileno())
    os.chmod(path, 0o644)


def read_plan_summary(folder: str | Path) -> dict[str, Any] | None:
    """The ``plan.json`` of a plan folder, or None when there is none (for the report)."""
    p = Path(folder) / "plan.json"
    if not p.is_file():
        return None
    data = json.loads(p.read_text(encoding="utf-8"))
    return data if isinstance(data, dict) and data.get("schema") == PLAN_SCHEMA else None


def find_plan_summary(
    study: Study, *, output_dir: str | Path | None = None
) -> dict[str, Any] | None:
    """The plan summary of a study: ``plan.json`` beside the study definition, in its ``plan/``
    folder, or in ``<output_dir>/<study-id>/plan``; None when no plan is found."""
    places = [study.path.parent, study.path.parent / "plan"]
    if study.key_path is not None:
        places.insert(0, study.key_path.parent.parent)
        places.insert(0, study.key_path.parent)
    if output_dir is not None:
        places.append(plan_folder(study, output_dir))
    for place in places:
        got = read_plan_summary(place)
        if got is not None and got.get("study", {}).get("id") == study.id:
            return got
    return None
