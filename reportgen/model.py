"""The data every layer shares: a loaded study definition and its ratings.

These classes are the contract between the loaders (``study.py``, ``ratings.py``), the
analysis layer, the verdict, the report, the planner and the archive.  They are plain
frozen dataclasses: no I/O, no pandas at import time.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np

from .errors import Location

Scale = Literal["binary", "nominal", "ordinal"]
MISSING = -1  # value of an absent rating in Ratings.codes


@dataclass(frozen=True)
class Category:
    code: str  # always text: YAML 1 and CSV "1" match
    label: str
    value: float | None = None  # numeric value, for the interval level of Krippendorff's alpha
    description: str | None = None  # what the category means, shown in the study design section


@dataclass(frozen=True)
class Rater:
    id: str
    name: str


@dataclass(frozen=True)
class SignOff:
    prepared_by: str | None = None
    reviewed_by: str | None = None
    approved_by: str | None = None


@dataclass(frozen=True)
class Study:
    """A validated study definition.  Paths are absolute (resolved against the YAML file)."""

    path: Path  # the study definition file
    id: str
    title: str
    purpose: str | None
    characteristic: str | None
    station: str | None
    revision: int
    date: dt.date | None
    scale: Scale
    categories: tuple[Category, ...]
    raters: tuple[Rater, ...]
    trials: int
    ratings_path: Path
    defect_category: str | None = None  # code; required for binary studies
    ratings_sheet: str | None = None  # xlsx sheet name (None = first sheet)
    reference_path: Path | None = None  # None: no reference file (may still be a column)
    key_path: Path | None = None  # plan key: ratings carry coded labels (see plan.py)
    missing: Literal["refuse", "allow"] = "refuse"
    confidence: float = 0.95
    proportion_interval: Literal["clopper-pearson", "wilson"] = "clopper-pearson"
    bootstrap_resamples: int = 2000
    bootstrap_seed: int = 1
    weights: Literal["linear", "quadratic"] | tuple[tuple[float, ...], ...] = "linear"
    target_half_width: float = 0.10
    safety_related: bool = False
    #: published scale for the size words of kappa-type coefficients (reportgen.sizewords)
    size_words: str = "landis-koch-1977"
    criteria: Any = None  # raw mapping from YAML; validated by verdict.py
    certification: Any = None  # raw mapping from YAML; validated by verdict.py
    signoff: SignOff = field(default_factory=SignOff)
    paper: Literal["A4", "letter"] = "A4"
    templates_path: Path | None = None  # study-local template override folder
    plan: Any = None  # raw mapping from YAML; used by plan.py
    measured: Any = None  # raw measured_reference mapping; validated by measured.py
    #: YAML position of every key, e.g. ("criteria", "rules", 0, "measure") -> Location
    locations: dict[tuple[Any, ...], Location] = field(default_factory=dict, repr=False)

    @property
    def category_codes(self) -> tuple[str, ...]:
        return tuple(c.code for c in self.categories)

    @property
    def rater_ids(self) -> tuple[str, ...]:
        return tuple(r.id for r in self.raters)

    def locate(self, *keys: Any) -> Location:
        """Best known position of a key path; falls back to the closest parent, then the file."""
        k = tuple(keys)
        while k:
            if k in self.locations:
                return self.locations[k]
            k = k[:-1]
        return Location(str(self.path))


@dataclass(frozen=True)
class SourceFile:
    """An input file as read, for the data integrity section and the archive."""

    path: Path
    role: str  # "study" | "ratings" | "reference" | "key"
    sha256: str
    size: int
    rows: int  # data rows read (0 for the study definition)
    encoding: str | None = None
    delimiter: str | None = None
    layout: str | None = None  # "long" | "wide" | "xlsx-long" | "xlsx-wide"


@dataclass(frozen=True)
class Ratings:
    """Ratings of one study, checked against it.

    ``codes[i, r, t]`` is the index into ``categories`` of the rating of item ``items[i]`` by
    rater ``raters[r]`` in trial ``t + 1``, or ``MISSING`` (-1) when absent.
    """

    items: tuple[str, ...]  # item ids, in order of first appearance in the ratings
    raters: tuple[str, ...]  # rater ids, in study order
    categories: tuple[str, ...]  # category codes, in study order
    codes: np.ndarray  # int8, shape (n_items, n_raters, n_trials)
    reference: np.ndarray | None = (
        None  # int8 (n_items,), category index, -1 = none; None = no reference
    )
    sources: tuple[SourceFile, ...] = ()
    notes: tuple[str, ...] = ()  # things said while reading, e.g. "decoded as cp1252"

    @property
    def n_items(self) -> int:
        return int(self.codes.shape[0])

    @property
    def n_raters(self) -> int:
        return int(self.codes.shape[1])

    @property
    def n_trials(self) -> int:
        return int(self.codes.shape[2])

    @property
    def has_reference(self) -> bool:
        return self.reference is not None

    def long_table(self) -> Any:
        """The tidy table ``item, rater, trial, rating`` (pandas DataFrame, missing rows left out)."""
        import pandas as pd

        i, r, t = np.nonzero(self.codes != MISSING)
        cats = np.asarray(self.categories, dtype=object)
        return pd.DataFrame(
            {
                "item": np.asarray(self.items, dtype=object)[i],
                "rater": np.asarray(self.raters, dtype=object)[r],
                "trial": t + 1,
                "rating": cats[self.codes[i, r, t]],
            }
        )
