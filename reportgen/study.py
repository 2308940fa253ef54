"""Study definition: YAML file -> validated :class:`reportgen.model.Study`.

The keys are documented in the README ("Study definition reference").  Every problem found is
collected and raised at once as one :class:`InputError`; each names the file, line, column and
key path (``raters[2].id``).  ``criteria``, ``certification`` and ``plan`` are kept as plain
Python values with their positions in ``Study.locations``; ``verdict.py`` and ``plan.py``
validate them.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import os
import re
from pathlib import Path
from typing import Any

from .errors import InputError, Location, Problem, ProblemCollector
from .model import Category, Rater, SignOff, Study
from .yamlio import KeyPath, YamlDocument, display_path, format_key, read_yaml

TOP_KEYS = (
    "study",
    "scale",
    "categories",
    "defect_category",
    "raters",
    "trials",
    "ratings",
    "reference",
    "key",
    "missing",
    "confidence",
    "interval",
    "bootstrap",
    "weights",
    "target_half_width",
    "size_words",
    "criteria",
    "certification",
    "signoff",
    "report",
    "plan",
    "measured_reference",
)
STUDY_KEYS = (
    "id",
    "title",
    "purpose",
    "characteristic",
    "station",
    "revision",
    "date",
    "safety_related",
)
CATEGORY_KEYS = ("code", "label", "value", "description")
RATER_KEYS = ("id", "name")
RATINGS_KEYS = ("file", "sheet")
BOOTSTRAP_KEYS = ("resamples", "seed")
SIGNOFF_KEYS = ("prepared_by", "reviewed_by", "approved_by")
REPORT_KEYS = ("paper", "templates")

SCALES = ("binary", "nominal", "ordinal")
MISSING_POLICIES = ("refuse", "allow")
INTERVALS = ("clopper-pearson", "wilson")
WEIGHT_KINDS = ("linear", "quadratic")
PAPERS = ("A4", "letter")
TABLE_SUFFIXES = (".csv", ".txt", ".tsv", ".xlsx")
#: codes are stored as int8 in Ratings.codes, -1 meaning missing
MAX_CATEGORIES = 100
#: most bootstrap resamples a study may ask (memory grows with them; 2,000 is the default and
#: 10,000 is plenty for a 95 % interval's second digit)
MAX_RESAMPLES = 100_000
#: most trials per rater a study may declare
MAX_TRIALS = 100
#: dates a study may carry (a certification's valid-until must still be a date)
MIN_DATE = dt.date(1900, 1, 1)
MAX_DATE = dt.date(2999, 12, 31)
STUDY_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]*$")
#: longest study id: it names folders and files, and file names are limited to 255 bytes
MAX_STUDY_ID = 100
#: longest rater id: a code that names run sheet files (<rater>-trial-<n>.pdf)
MAX_RATER_ID = 64

_ABSENT = object()


def suggest(word: str, choices: tuple[str, ...] | list[str]) -> str | None:
    """The nearest of ``choices`` to ``word`` (case-insensitive first), or None."""
    low = {c.lower(): c for c in choices}
    if word.lower() in low:
        return low[word.lower()]
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    if close:
        return close[0]
    close = difflib.get_close_matches(word.lower(), list(low), n=1, cutoff=0.6)
    return low[close[0]] if close else None


def did_you_mean(word: str, choices: tuple[str, ...] | list[str]) -> str | None:
    s = suggest(word, choices)
    return f"did you mean {s!r}?" if s is not None else None


class _Reader:
    """Typed access to a :class:`YamlDocument` that records problems instead of raising."""

    def __init__(self, doc: YamlDocument, *, require_inputs: bool = True) -> None:
        self.doc = doc
        self.problems = ProblemCollector(limit=50)
        self.require_inputs = require_inputs  # False: input files named may not exist yet

    # -- plumbing -------------------------------------------------------------------------
    def get(self, keys: KeyPath) -> Any:
        node: Any = self.doc.data
        for k in keys:
            if isinstance(k, int):
                if not isinstance(node, list) or k >= len(node):
                    return _ABSENT
            elif not isinstance(node, dict) or k not in node:
                return _ABSENT
            node = node[k]
        return node

    def error(
        self, keys: KeyPath, message: str, hint: str | None = None, *, key_node: bool = False
    ) -> None:
        loc = self.doc.where(keys, key_node=key_node)
        self.problems.add(
            loc.path,
            message,
            line=loc.line,
            column=loc.column,
            key=format_key(keys) or None,
            hint=hint,
        )

    def mapping(
        self, keys: KeyPath, allowed: tuple[str, ...], *, required: bool = False
    ) -> dict[str, Any] | None:
        value = self.get(keys)
        if value is _ABSENT or value is None:
            if required:
                self.missing(keys)
            return None
        if not isinstance(value, dict):
            self.error(keys, f"must be a mapping of {', '.join(allowed)}, got {_kind(value)}")
            return None
        for k in value:
            if k not in allowed:
                self.error(
                    (*keys, k),
                    f"unknown key {k!r}",
                    did_you_mean(str(k), allowed) or f"known keys: {', '.join(allowed)}",
                    key_node=True,
                )
        return value

    def missing(self, keys: KeyPath) -> None:
        parent = keys[:-1]
        where = f" in {format_key(parent)}" if parent else ""
        self.error(keys, f"required key {keys[-1]!r} is missing{where}")

    # -- scalars ---------------------------------------------------------------------------
    def text(self, keys: KeyPath, *, required: bool = False) -> str | None:
        """Any scalar taken as the text written in the file (``No`` stays ``No``)."""
        value = self.get(keys)
        if value is _ABSENT or value is None:
            if required:
                if value is None:
                    self.error(keys, "must not be empty")
                else:
                    self.missing(keys)
            return None
        if isinstance(value, dict | list):
            self.error(keys, f"must be text, got {_kind(value)}")
            return None
        text = self.doc.texts.get(keys, str(value)).strip()
        if not text and required:
            self.error(keys, "must not be empty")
            return None
        return text

    def integer(
        self,
        keys: KeyPath,
        *,
        default: int,
        minimum: int | None = None,
        maximum: int | None = None,
    ) -> int:
        value = self.get(keys)
        if value is _ABSENT or value is None:
            return default
        if isinstance(value, bool) or not isinstance(value, int):
            self.error(keys, f"must be a whole number, got {self._shown(keys, value)}")
            return default
        if minimum is not None and value < minimum:
            self.error(keys, f"must be at least {minimum}, got {value}")
            return default
        if maximum is not None and value > maximum:
            self.error(keys, f"must be at most {maximum:,}, got {value:,}")
            return default
        return value

    def number(self, keys: KeyPath) -> float | None:
        value = self.get(keys)
        if value is _ABSENT or value is None:
            return None
        if (
            isinstance(value, bool)
            or not isinstance(value, int | float)
            or not math.isfinite(value)
        ):
            self.error(keys, f"must be a number, got {self._shown(keys, value)}")
            return None
        return float(value)

    def boolean(self, keys: KeyPath, *, default: bool) -> bool:
        value = self.get(keys)
        if value is _ABSENT or value is None:
            return default
        if not isinstance(value, bool):
            self.error(keys, f"must be true or false, got {self._shown(keys, value)}")
            return default
        return value

    def choice(
        self,
        keys: KeyPath,
        choices: tuple[str, ...],
        *,
        default: str | None,
        required: bool = False,
    ) -> str | None:
        value = self.text(keys, required=required)
        if value is None:
            return default
        if value not in choices:
            self.error(
                keys,
                f"must be one of {', '.join(choices)}, got {value!r}",
                did_you_mean(value, choices),
            )
            return default
        return value

    def _shown(self, keys: KeyPath, value: Any) -> str:
        if isinstance(value, dict | list):
            return _kind(value)
        return repr(self.doc.texts.get(keys, str(value)))

    # -- files -----------------------------------------------------------------------------
    def file(self, keys: KeyPath, *, base: Path, what: str, folder: bool = False) -> Path | None:
        name = self.text(keys, required=False)
        if name is None:
            return None
        if not name:
            self.error(keys, f"the {what} path is empty")
            return None
        p = Path(name).expanduser()
        if not p.is_absolute():
            p = base / p
        p = Path(os.path.normpath(p))
        if folder:
            if not p.is_dir():
                self.error(keys, f"{what} folder not found: {display_path(p)}")
                return None
            return p
        if not p.exists() and not self.require_inputs:
            return p
        if not p.exists():
            self.error(
                keys,
                f"{what} file not found: {display_path(p)}",
                "paths are relative to the study definition's folder",
            )
            return None
        if p.is_dir():
            self.error(keys, f"{what} path is a folder, not a file: {display_path(p)}")
            return None
        return p


def _kind(value: Any) -> str:
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if isinstance(value, bool):
        return "true/false"
    return type(value).__name__


def load_study(path: str | os.PathLike[str], *, require_inputs: bool = True) -> Study:
    """Read and validate a study definition; raise :class:`InputError` listing every problem.

    ``require_inputs=False`` (``reportgen plan``, before the first rating) accepts ratings,
    reference, key and templates paths that do not exist yet; everything else is checked.
    """
    doc = read_yaml(path)
    if not isinstance(doc.data, dict):
        raise InputError(
            [
                Problem(
                    Location(doc.shown, 1, 1),
                    f"the study definition must be a mapping of keys, got {_kind(doc.data)}",
                    "give the study definition (study.yaml), not a ratings or reference file"
                    if Path(path).suffix.lower() in (".csv", ".tsv", ".txt", ".xlsx")
                    else None,
                )
            ]
        )
    r = _Reader(doc, require_inputs=require_inputs)
    base = Path(path).resolve().parent

    r.mapping((), TOP_KEYS)

    # study: identification
    r.mapping(("study",), STUDY_KEYS, required=True)
    study_id = r.text(("study", "id"), required=True)
    if study_id is not None and not STUDY_ID.match(study_id):
        r.error(
            ("study", "id"),
            f"{study_id!r} may hold only letters, digits, '-', '_' and '.', starting with a letter or digit",
            "the id is used in folder names",
        )
        study_id = None
    if study_id is not None and len(study_id) > MAX_STUDY_ID:
        r.error(
            ("study", "id"),
            f"the id has {len(study_id)} characters; at most {MAX_STUDY_ID} are allowed",
            "the id names folders and files (<id>-rev<N>.pdf); keep it short",
        )
        study_id = None
    title = r.text(("study", "title"), required=True)
    purpose = r.text(("study", "purpose"))
    characteristic = r.text(("study", "characteristic"))
    station = r.text(("study", "station"))
    revision = r.integer(("study", "revision"), default=1, minimum=1)
    date = _date(r, ("study", "date"))
    safety = r.boolean(("study", "safety_related"), default=False)

    scale = r.choice(("scale",), SCALES, default=None, required=True)
    categories = _categories(r)
    codes = [c.code for c in categories]
    defect = r.text(("defect_category",))
    if defect is not None and codes and defect not in codes:
        r.error(
            ("defect_category",),
            f"{defect!r} is not a declared category code ({', '.join(codes)})",
            did_you_mean(defect, codes),
        )
        defect = None
    if scale == "binary":
        if categories and len(categories) != 2:
            r.error(
                ("categories",), f"a binary study has exactly 2 categories, got {len(categories)}"
            )
        if r.get(("defect_category",)) in (_ABSENT, None):
            r.error(
                ("defect_category",),
                "required for a binary study: the code of the nonconforming category",
            )

    raters = _raters(r)
    trials = r.integer(("trials",), default=1, minimum=1, maximum=MAX_TRIALS)
    if r.get(("trials",)) is _ABSENT:
        r.missing(("trials",))

    ratings_path, sheet = _ratings_file(r, base)
    reference_path = r.file(("reference",), base=base, what="reference")
    key_path = r.file(("key",), base=base, what="key")
    missing = r.choice(("missing",), MISSING_POLICIES, default="refuse")
    confidence = r.number(("confidence",))
    if confidence is None:
        confidence = 0.95
    elif not 0.5 < confidence < 1:
        r.error(
            ("confidence",),
            f"must be between 0.5 and 1 (exclusive), got {confidence:g}",
            "for example 0.95",
        )
        confidence = 0.95
    interval = r.choice(("interval",), INTERVALS, default="clopper-pearson")

    r.mapping(("bootstrap",), BOOTSTRAP_KEYS)
    resamples = r.integer(
        ("bootstrap", "resamples"), default=2000, minimum=0, maximum=MAX_RESAMPLES
    )
    seed = r.integer(("bootstrap", "seed"), default=1, minimum=0)

    weights = _weights(r, len(categories))
    half_width = r.number(("target_half_width",))
    if half_width is None:
        half_width = 0.10
    elif not 0 < half_width < 0.5:
        r.error(
            ("target_half_width",),
            f"must be between 0 and 0.5, got {half_width:g}",
            "for example 0.10",
        )
        half_width = 0.10

    from .sizewords import DEFAULT_SCALE, KAPPA_SCALES

    size_words = r.choice(("size_words",), KAPPA_SCALES, default=DEFAULT_SCALE)

    r.mapping(("signoff",), SIGNOFF_KEYS)
    signoff = SignOff(*(r.text(("signoff", k)) for k in SIGNOFF_KEYS))
    r.mapping(("report",), REPORT_KEYS)
    paper = r.choice(("report", "paper"), PAPERS, default="A4")
    templates = r.file(("report", "templates"), base=base, what="templates", folder=True)

    raw = {k: r.get((k,)) for k in ("criteria", "certification", "plan", "measured_reference")}
    raw = {k: (None if v is _ABSENT else v) for k, v in raw.items()}

    r.problems.items.sort(key=lambda p: (p.location.line or 0, p.location.column or 0))
    r.problems.raise_if_any()
    # each of these None has been reported above, so raise_if_any has raised
    if study_id is None or title is None or scale is None or ratings_path is None:
        raise InputError.single(doc.shown, "incomplete study definition")
    return Study(
        path=Path(path).resolve(),
        id=study_id,
        title=title,
        purpose=purpose,
        characteristic=characteristic,
        station=station,
        revision=revision,
        date=date,
        scale=scale,  # type: ignore[arg-type]
        categories=tuple(categories),
        raters=tuple(raters),
        trials=trials,
        ratings_path=ratings_path,
        defect_category=defect,
        ratings_sheet=sheet,
        reference_path=reference_path,
        key_path=key_path,
        missing=missing,  # type: ignore[arg-type]
        confidence=confidence,
        proportion_interval=interval,  # type: ignore[arg-type]
        bootstrap_resamples=resamples,
        bootstrap_seed=seed,
        weights=weights,
        target_half_width=half_width,
        safety_related=safety,
        size_words=size_words or DEFAULT_SCALE,
        criteria=raw["criteria"],
        certification=raw["certification"],
        signoff=signoff,
        paper=paper,  # type: ignore[arg-type]
        templates_path=templates,
        plan=raw["plan"],
        measured=raw["measured_reference"],
        locations=dict(doc.locations),
    )


def _date(r: _Reader, keys: KeyPath) -> dt.date | None:
    value = r.get(keys)
    if value is _ABSENT or value is None:
        return None
    got: dt.date | None = None
    if isinstance(value, dt.datetime):
        got = value.date()
    elif isinstance(value, dt.date):
        got = value
    elif isinstance(value, str):
        try:
            got = dt.date.fromisoformat(value.strip())
        except ValueError:
            pass
    if got is None:
        r.error(keys, f"must be a date written YYYY-MM-DD, got {r._shown(keys, value)}")
        return None
    if not MIN_DATE <= got <= MAX_DATE:
        r.error(
            keys,
            f"{got.isoformat()} is outside the dates accepted ({MIN_DATE.isoformat()} to "
            f"{MAX_DATE.isoformat()}); check the year",
        )
        return None
    return got


def _categories(r: _Reader) -> list[Category]:
    value = r.get(("categories",))
    if value is _ABSENT or value is None:
        r.missing(("categories",))
        return []
    if not isinstance(value, list):
        r.error(("categories",), f"must be a list of categories, got {_kind(value)}")
        return []
    out: list[Category] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(value):
        keys: KeyPath = ("categories", i)
        if isinstance(entry, dict):
            r.mapping(keys, CATEGORY_KEYS)
            code_keys: KeyPath = (*keys, "code")
            code = r.text(code_keys, required=True)
            label = r.text((*keys, "label"))
            num = r.number((*keys, "value"))
            description = r.text((*keys, "description"))
        elif isinstance(entry, list) or entry is None:
            r.error(keys, "must be a category code or a mapping with code and label")
            continue
        else:
            code_keys = keys
            code = r.text(keys, required=True)
            label, num, description = None, None, None
        if code is None:
            continue
        raw = r.doc.texts.get(code_keys, code)
        if raw != raw.strip():
            r.error(code_keys, f"code {raw!r} starts or ends with spaces")
        if code in seen:
            r.error(
                code_keys,
                f"duplicate category code {code!r} (first at categories[{seen[code]}])",
                "give every category its own code",
            )
            continue
        seen[code] = i
        out.append(Category(code=code, label=label or code, value=num, description=description))
    if len(out) > MAX_CATEGORIES:
        r.error(("categories",), f"at most {MAX_CATEGORIES} categories, got {len(out)}")
    elif len(value) < 2:
        r.error(("categories",), f"at least 2 categories are needed, got {len(value)}")
    return out


def _raters(r: _Reader) -> list[Rater]:
    value = r.get(("raters",))
    if value is _ABSENT or value is None:
        r.missing(("raters",))
        return []
    if not isinstance(value, list) or not value:
        r.error(
            ("raters",),
            f"must be a list of raters, got {_kind(value) if value != [] else 'an empty list'}",
        )
        return []
    out: list[Rater] = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(value):
        keys: KeyPath = ("raters", i)
        if isinstance(entry, dict):
            r.mapping(keys, RATER_KEYS)
            id_keys: KeyPath = (*keys, "id")
            rid = r.text(id_keys, required=True)
            name = r.text((*keys, "name"))
        elif isinstance(entry, list) or entry is None:
            r.error(keys, "must be a rater id or a mapping with id and name")
            continue
        else:
            id_keys = keys
            rid = r.text(keys, required=True)
            name = None
        if rid is None:
            continue
        if rid in seen:
            r.error(
                id_keys,
                f"duplicate rater id {rid!r} (first at raters[{seen[rid]}])",
                "give every rater its own id",
            )
            continue
        if "/" in rid:
            r.error(
                id_keys,
                f"rater id {rid!r} must not contain '/'",
                "'/' separates rater and trial in wide ratings files",
            )
            continue
        if len(rid) > MAX_RATER_ID:
            r.error(
                id_keys,
                f"rater id has {len(rid)} characters; at most {MAX_RATER_ID} are allowed",
                "the id is a short code (it names run sheet files); put the full name in `name`",
            )
            continue
        seen[rid] = i
        out.append(Rater(id=rid, name=name or rid))
    return out


def _ratings_file(r: _Reader, base: Path) -> tuple[Path | None, str | None]:
    value = r.get(("ratings",))
    if value is _ABSENT or value is None:
        r.missing(("ratings",))
        return None, None
    sheet = None
    if isinstance(value, dict):
        r.mapping(("ratings",), RATINGS_KEYS)
        keys: KeyPath = ("ratings", "file")
        if r.get(keys) is _ABSENT:
            r.missing(keys)
            return None, None
        sheet = r.text(("ratings", "sheet"))
    else:
        keys = ("ratings",)
    path = r.file(keys, base=base, what="ratings")
    if path is None:
        return None, None
    suffix = path.suffix.lower()
    if suffix == ".xls":
        r.error(keys, "old .xls workbooks are not read", "save the workbook as .xlsx or CSV")
        return None, None
    if suffix not in TABLE_SUFFIXES:
        r.error(keys, f"ratings must be a .csv, .tsv, .txt or .xlsx file, got {path.name!r}")
        return None, None
    if sheet is not None and suffix != ".xlsx":
        r.error(("ratings", "sheet"), "a sheet name applies only to .xlsx ratings files")
    return path, sheet


def _weights(r: _Reader, k: int) -> Any:
    keys: KeyPath = ("weights",)
    value = r.get(keys)
    if value is _ABSENT or value is None:
        return "linear"
    if not isinstance(value, list):
        return r.choice(keys, WEIGHT_KINDS, default="linear")
    ok = True
    rows: list[tuple[float, ...]] = []
    if k and len(value) != k:
        r.error(keys, f"a weights matrix needs {k} rows (one per category), got {len(value)}")
        return "linear"
    for i, row in enumerate(value):
        if not isinstance(row, list) or (k and len(row) != k):
            r.error((*keys, i), f"row {i + 1} must be a list of {k} numbers")
            ok = False
            continue
        vals: list[float] = []
        for j, _ in enumerate(row):
            x = r.number((*keys, i, j))
            if x is None:
                ok = False
                vals.append(math.nan)
            elif not 0 <= x <= 1:
                r.error((*keys, i, j), f"weights lie between 0 and 1, got {x:g}")
                ok = False
                vals.append(x)
            else:
                vals.append(x)
        rows.append(tuple(vals))
    if not ok:
        return "linear"
    for i in range(len(rows)):
        if rows[i][i] != 1:
            r.error((*keys, i, i), f"the diagonal must be 1 (full agreement), got {rows[i][i]:g}")
            ok = False
        for j in range(i + 1, len(rows)):
            if rows[i][j] != rows[j][i]:
                r.error(
                    (*keys, j, i),
                    f"the matrix must be symmetric: row {i + 1} column {j + 1} is {rows[i][j]:g}, row {j + 1} column {i + 1} is {rows[j][i]:g}",
                )
                ok = False
    return tuple(rows) if ok else "linear"
