"""Size words for agreement coefficients, from named published scales only.

A study may name the scale used to put a kappa-type coefficient's size into words
(``size_words:``); Krippendorff's alpha always uses Krippendorff's own levels.  Words are given
only for the coefficient family a scale was written for: none for Kendall's W, tau-b or offsets.
The words describe; the criteria decide.

* ``landis-koch-1977``: Landis, J. R., Koch, G. G. (1977). The measurement of observer agreement
  for categorical data. Biometrics 33, 159–174: below 0.00 poor, 0.00–0.20 slight, 0.21–0.40
  fair, 0.41–0.60 moderate, 0.61–0.80 substantial, 0.81–1.00 almost perfect.
* ``fleiss-1981``: Fleiss, J. L. (1981). Statistical Methods for Rates and Proportions, 2nd ed.
  Wiley: below 0.40 poor, 0.40 to 0.75 fair to good, above 0.75 excellent.
* ``krippendorff-2004`` (alpha only): Krippendorff, K. (2004). Content Analysis, 2nd ed. Sage:
  rely on alpha of at least 0.800; 0.667 to 0.800 for tentative conclusions only.
"""

from __future__ import annotations

from dataclasses import dataclass

#: coefficient keys (last part of a results path) of the kappa family
KAPPA_FAMILY = frozenset(
    {
        "cohen_kappa",
        "weighted_kappa",
        "weighted_pairwise_kappa",
        "fleiss_kappa",
        "fleiss_kappa_by_category",
        "conger_kappa",
        "light_kappa",
        "gwet_ac1",
        "gwet_ac2",
        "brennan_prediger",
        "pairwise_cohen_kappa",
    }
)
ALPHA_FAMILY = frozenset({"krippendorff_alpha", "krippendorff_alpha_interval"})


@dataclass(frozen=True)
class Scale:
    name: str
    family: str  # "kappa" | "alpha"
    #: (upper end, word): the word applies up to and including ``upper`` (None = no upper end);
    #: ``below`` is the word under the first cut-point
    bands: tuple[tuple[float | None, str], ...]
    lower_inclusive: bool  # True: every cut-point starts the band above it (alpha >= 0.800)
    source: str
    cut_text: str


SCALES: dict[str, Scale] = {
    s.name: s
    for s in (
        Scale(
            "landis-koch-1977",
            "kappa",
            (
                (0.0, "poor"),
                (0.20, "slight"),
                (0.40, "fair"),
                (0.60, "moderate"),
                (0.80, "substantial"),
                (None, "almost perfect"),
            ),
            False,
            "Landis, J. R., Koch, G. G. (1977). The measurement of observer agreement for "
            "categorical data. Biometrics 33, 159–174.",
            "below 0.00 poor; 0.00 to 0.20 slight; 0.21 to 0.40 fair; 0.41 to 0.60 moderate; "
            "0.61 to 0.80 substantial; 0.81 to 1.00 almost perfect",
        ),
        Scale(
            "fleiss-1981",
            "kappa",
            ((0.40, "poor"), (0.75, "fair to good"), (None, "excellent")),
            False,
            "Fleiss, J. L. (1981). Statistical Methods for Rates and Proportions, 2nd edition. "
            "Wiley, New York.",
            "below 0.40 poor; 0.40 to 0.75 fair to good; above 0.75 excellent",
        ),
        Scale(
            "krippendorff-2004",
            "alpha",
            (
                (0.667, "too low to rely on"),
                (0.800, "tentative conclusions only"),
                (None, "reliable"),
            ),
            True,
            "Krippendorff, K. (2004). Content Analysis: An Introduction to Its Methodology, 2nd "
            "edition. Sage, Thousand Oaks.",
            "below 0.667 too low to rely on; 0.667 up to 0.800 tentative conclusions only; "
            "0.800 and above reliable",
        ),
    )
}

#: scales a study may name for kappa-type coefficients, the default first
KAPPA_SCALES = ("landis-koch-1977", "fleiss-1981")
DEFAULT_SCALE = "landis-koch-1977"
ALPHA_SCALE = "krippendorff-2004"


def scale_for(key: str, kappa_scale: str = DEFAULT_SCALE) -> Scale | None:
    """The scale that puts a coefficient's size into words, or ``None`` (no published scale)."""
    if key in ALPHA_FAMILY:
        return SCALES[ALPHA_SCALE]
    if key in KAPPA_FAMILY:
        return SCALES[kappa_scale]
    return None


def band(value: float, scale: Scale) -> str:
    """The word of ``scale`` for ``value``.

    The first cut-point is exclusive (Landis & Koch: 0.00 is slight; Fleiss: 0.40 is fair to
    good).  The later ones include their upper end for the kappa scales (0.20 slight, 0.75 fair
    to good) and start the next band for Krippendorff's (0.800 reliable): ``lower_inclusive``.
    """
    for i, (upper, word) in enumerate(scale.bands):
        if upper is None:
            return word
        if i == 0 or scale.lower_inclusive:
            if value < upper:
                return word
        elif value <= upper + 1e-12:
            return word
    return scale.bands[-1][1]


def size_word(value: float, key: str, kappa_scale: str = DEFAULT_SCALE) -> str | None:
    s = scale_for(key, kappa_scale)
    return band(value, s) if s is not None else None


def statement(kappa_scale: str, keys: set[str] | frozenset[str]) -> list[dict[str, str]]:
    """Method-statement paragraphs: each scale used, its cut-points and source."""
    out = []
    if keys & KAPPA_FAMILY:
        s = SCALES[kappa_scale]
        out.append(
            {
                "scale": s.name,
                "applies_to": "kappa-type coefficients (Cohen, weighted, Fleiss, Conger, Light, "
                "Gwet's AC1/AC2, Brennan–Prediger)",
                "cut_points": s.cut_text,
                "source": s.source,
            }
        )
    if keys & ALPHA_FAMILY:
        s = SCALES[ALPHA_SCALE]
        out.append(
            {
                "scale": s.name,
                "applies_to": "Krippendorff's alpha",
                "cut_points": s.cut_text,
                "source": s.source,
            }
        )
    return out


CONVENTION_TEXT = (
    "The words for a coefficient's size are conventions of the published scale named here, not "
    "findings of this study; the acceptance criteria decide. No words are given for Kendall's W, "
    "tau-b or the offsets, for which no such scale is applied."
)
