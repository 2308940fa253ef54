"""What the method statement says about each measure: name, formula, why, source.

Formulas are plain typographic text (Unicode sub- and superscripts, no MathML), so they read
the same in the HTML, the PDF and a text extract.  Every character used here is covered by
the shipped font (checked by the glyph test).  Sources are the original publications, listed
in full in :data:`BIBLIOGRAPHY`.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class MeasureInfo:
    key: str
    name: str
    formula: tuple[str, ...]
    why: str
    source: tuple[str, ...]  # bibliography keys
    kind: str  # "proportion" | "coefficient" | "rate" | "rank"


MEASURES: dict[str, MeasureInfo] = {
    m.key: m
    for m in (
        MeasureInfo(
            "agreement",
            "Agreement rate",
            ("A = Agreeing / Items",),
            "The share of items on which the compared ratings all agree: the plainest figure, "
            "with an exact or score interval for a proportion.",
            ("clopper1934", "wilson1927"),
            "proportion",
        ),
        MeasureInfo(
            "effectiveness",
            "Effectiveness",
            ("E = ratings equal to the reference / all ratings",),
            "Counts every single rating against the reference, so a rater who is right in two "
            "trials out of three still gets credit for the two.",
            ("clopper1934",),
            "proportion",
        ),
        MeasureInfo(
            "exact_agreement",
            "Exact agreement",
            ("Exact = ratings equal to the reference / ratings of items with a reference",),
            "On an ordered scale, the strict count: a rating one step off is as wrong here as one "
            "three steps off; read it beside within one step.",
            ("clopper1934", "wilson1927"),
            "proportion",
        ),
        MeasureInfo(
            "within_one_agreement",
            "Within one step",
            (
                "W₁ = ratings at most one category from the reference / ratings of items with a "
                "reference",
            ),
            "On an ordered scale, a rating next to the reference is a near miss rather than a "
            "wrong call; this share shows how many ratings are at worst near misses.",
            ("clopper1934", "wilson1927"),
            "proportion",
        ),
        MeasureInfo(
            "miss_rate",
            "Miss rate",
            ("P(miss) = ratings of defect items called conforming / ratings of defect items",),
            "A missed defect reaches the customer; the upper end of its interval is the figure "
            "that matters for a release decision.",
            ("clopper1934",),
            "rate",
        ),
        MeasureInfo(
            "false_alarm_rate",
            "False alarm rate",
            (
                "P(false alarm) = ratings of conforming items called defect / ratings of conforming items",
            ),
            "A false alarm costs scrap or rework of good items; it shows a rater who is too strict.",
            ("clopper1934",),
            "rate",
        ),
        MeasureInfo(
            "cohen_kappa",
            "Cohen's kappa",
            ("κ = (pₒ − pₑ) / (1 − pₑ)", "pₑ = Σₖ p₁ₖ · p₂ₖ  (product of the two margins)"),
            "Agreement of one rater with the reference beyond what the two sets of category "
            "frequencies would give by chance.",
            ("cohen1960", "fleiss1969"),
            "coefficient",
        ),
        MeasureInfo(
            "weighted_kappa",
            "Weighted kappa",
            (
                "κw = (pₒ(w) − pₑ(w)) / (1 − pₑ(w))",
                "pₒ(w) = Σᵢⱼ wᵢⱼ pᵢⱼ ,  pₑ(w) = Σᵢⱼ wᵢⱼ pᵢ· p·ⱼ",
                "linear wᵢⱼ = 1 − |i − j| / (k − 1) ;  quadratic wᵢⱼ = 1 − (i − j)² / (k − 1)²",
            ),
            "On an ordered scale a rating one step off is a smaller error than one three steps "
            "off; the weights give partial credit for near misses.",
            ("cohen1968", "fleiss1969"),
            "coefficient",
        ),
        MeasureInfo(
            "fleiss_kappa",
            "Fleiss' kappa",
            (
                "κ = (P̄ − P̄ₑ) / (1 − P̄ₑ)",
                "P̄ = mean over items of Σₖ nᵢₖ (nᵢₖ − 1) / (nᵢ (nᵢ − 1)) ,  P̄ₑ = Σₖ p̄ₖ²",
            ),
            "Chance-corrected agreement of many ratings per item, without pairing raters; also "
            "used for one rater's repeated trials.",
            ("fleiss1971", "fleiss1979"),
            "coefficient",
        ),
        MeasureInfo(
            "fleiss_kappa_by_category",
            "Fleiss' kappa per category",
            ("κₖ = 1 − Σᵢ nᵢₖ (nᵢ − nᵢₖ) / (Σᵢ nᵢ (nᵢ − 1) · p̄ₖ (1 − p̄ₖ))",),
            "Shows which categories the raters separate well and which they mix up.",
            ("fleiss1971", "fleiss1979"),
            "coefficient",
        ),
        MeasureInfo(
            "krippendorff_alpha",
            "Krippendorff's alpha",
            (
                "α = 1 − Dₒ / Dₑ",
                "Dₒ, Dₑ: observed and expected disagreement under the scale's distance δ²",
            ),
            "Works with missing ratings and with the scale's own notion of distance (nominal, "
            "ordinal or interval).",
            ("krippendorff2004", "hayes2007"),
            "coefficient",
        ),
        MeasureInfo(
            "krippendorff_alpha_interval",
            "Krippendorff's alpha (interval)",
            ("α = 1 − Dₒ / Dₑ ,  δ²(c, k) = (value_c − value_k)²",),
            "Uses the numeric values given to the categories, for scales whose steps are equal.",
            ("krippendorff2004",),
            "coefficient",
        ),
        MeasureInfo(
            "gwet_ac1",
            "Gwet's AC1",
            ("AC1 = (pₐ − pₑ) / (1 − pₑ) ,  pₑ = Σₖ πₖ (1 − πₖ) / (q − 1)",),
            "Stays informative when nearly all items fall in one category, where kappa can be "
            "low even though agreement is high.",
            ("gwet2008", "gwet2014"),
            "coefficient",
        ),
        MeasureInfo(
            "gwet_ac2",
            "Gwet's AC2",
            ("AC2 = (pₐ(w) − pₑ(w)) / (1 − pₑ(w)) ,  pₑ(w) = T_w / (q (q − 1)) · Σₖ πₖ (1 − πₖ)",),
            "The weighted form of AC1 for ordered scales.",
            ("gwet2014",),
            "coefficient",
        ),
        MeasureInfo(
            "conger_kappa",
            "Conger's kappa",
            (
                "κ_C = (pₒ − pₑ) / (1 − pₑ) ,  pₑ from each rater's own category margins, over all rater pairs",
            ),
            "A multi-rater kappa that keeps each rater's own tendencies, where Fleiss' kappa pools them.",
            ("conger1980",),
            "coefficient",
        ),
        MeasureInfo(
            "light_kappa",
            "Light's kappa",
            ("κ_L = mean of Cohen's κ over all pairs of raters",),
            "Easy to explain: the average of the kappas of every pair of raters.",
            ("light1971",),
            "coefficient",
        ),
        MeasureInfo(
            "brennan_prediger",
            "Brennan–Prediger coefficient",
            ("κ_BP = (pₒ − 1/q) / (1 − 1/q)",),
            "Chance agreement taken as equal use of the q categories; a check on how much the "
            "other coefficients depend on the category frequencies.",
            ("brennan1981",),
            "coefficient",
        ),
        MeasureInfo(
            "kendall_w",
            "Kendall's W",
            ("W = 12 S / (m² (n³ − n) − m Σ T) ,  S = Σᵢ (Rᵢ − R̄)²",),
            "For ordered scales: do the raters put the items in the same order, even if one "
            "grades more strictly?",
            ("kendall1939",),
            "rank",
        ),
        MeasureInfo(
            "kendall_tau_b",
            "Kendall's tau-b",
            ("τ_b = (n_c − n_d) / √((n₀ − n₁)(n₀ − n₂))",),
            "For ordered scales: does a rater order the items as the reference does, with ties allowed?",
            ("kendall1945",),
            "rank",
        ),
    )
}

#: Bibliography of the methods (original publications).
BIBLIOGRAPHY: dict[str, str] = {
    "brennan1981": "Brennan, R. L., Prediger, D. J. (1981). Coefficient kappa: some uses, misuses, and "
    "alternatives. Educational and Psychological Measurement 41, 687–699.",
    "byrt1993": "Byrt, T., Bishop, J., Carlin, J. B. (1993). Bias, prevalence and kappa. "
    "Journal of Clinical Epidemiology 46, 423–429.",
    "clopper1934": "Clopper, C. J., Pearson, E. S. (1934). The use of confidence or fiducial limits "
    "illustrated in the case of the binomial. Biometrika 26, 404–413.",
    "cohen1960": "Cohen, J. (1960). A coefficient of agreement for nominal scales. Educational and "
    "Psychological Measurement 20, 37–46.",
    "cohen1968": "Cohen, J. (1968). Weighted kappa: nominal scale agreement with provision for scaled "
    "disagreement or partial credit. Psychological Bulletin 70, 213–220.",
    "conger1980": "Conger, A. J. (1980). Integration and generalization of kappas for multiple raters. "
    "Psychological Bulletin 88, 322–328.",
    "efron1993": "Efron, B., Tibshirani, R. J. (1993). An Introduction to the Bootstrap. Chapman & Hall.",
    "feinstein1990": "Feinstein, A. R., Cicchetti, D. V. (1990). High agreement but low kappa: I. The "
    "problems of two paradoxes. Journal of Clinical Epidemiology 43, 543–549.",
    "fleiss1969": "Fleiss, J. L., Cohen, J., Everitt, B. S. (1969). Large sample standard errors of "
    "kappa and weighted kappa. Psychological Bulletin 72, 323–327.",
    "fleiss1971": "Fleiss, J. L. (1971). Measuring nominal scale agreement among many raters. "
    "Psychological Bulletin 76, 378–382.",
    "fleiss1979": "Fleiss, J. L., Nee, J. C. M., Landis, J. R. (1979). Large sample variance of kappa "
    "in the case of different sets of raters. Psychological Bulletin 86, 974–977.",
    "gwet2008": "Gwet, K. L. (2008). Computing inter-rater reliability and its variance in the presence "
    "of high agreement. British Journal of Mathematical and Statistical Psychology 61, 29–48.",
    "gwet2014": "Gwet, K. L. (2014). Handbook of Inter-Rater Reliability, 4th edition. Advanced "
    "Analytics, LLC.",
    "hayes2007": "Hayes, A. F., Krippendorff, K. (2007). Answering the call for a standard reliability "
    "measure for coding data. Communication Methods and Measures 1, 77–89.",
    "kendall1939": "Kendall, M. G., Babington Smith, B. (1939). The problem of m rankings. Annals of "
    "Mathematical Statistics 10, 275–287.",
    "kendall1945": "Kendall, M. G. (1945). The treatment of ties in ranking problems. Biometrika 33, 239–251.",
    "krippendorff2004": "Krippendorff, K. (2004). Content Analysis: An Introduction to Its Methodology, "
    "2nd edition. Sage.",
    "light1971": "Light, R. J. (1971). Measures of response agreement for qualitative data: some "
    "generalizations and alternatives. Psychological Bulletin 76, 365–377.",
    "wilson1927": "Wilson, E. B. (1927). Probable inference, the law of succession, and statistical "
    "inference. Journal of the American Statistical Association 22, 209–212.",
}

GLOSSARY: tuple[tuple[str, str], ...] = (
    ("item", "one physical thing being classified (a part, a sample, a photo)"),
    ("rater", "one person who classifies items; called inspector on the certification pages"),
    ("trial", "one blind pass of one rater over all items"),
    ("rating", "one classification of one item by one rater in one trial"),
    ("category", "one of the answers a rater may give"),
    ("reference", "the agreed correct category of an item (reference value)"),
    ("panel", "all raters of the study taken together"),
    ("repeatability", "a rater agreeing with their own ratings of the same item in other trials"),
    ("reproducibility", "different raters agreeing with each other"),
    (
        "chance-corrected",
        "a coefficient that subtracts the agreement the category frequencies alone would give: 0 = chance, 1 = perfect",
    ),
    (
        "interval",
        "the confidence interval: the range of true values the data are consistent with, at the stated level",
    ),
    ("criterion", "one acceptance rule: a measure, a pass level and a marginal level"),
    ("criterion outcome", "meets, marginal or short"),
    ("verdict", "the study's overall outcome: PASS or IMPROVE"),
    ("misses", "defect items rated as conforming"),
    ("false alarms", "conforming items rated as defect"),
    ("changed calls", "items a rater called differently in different trials"),
    ("steps apart", "on an ordered scale, how many categories separate two ratings"),
)
