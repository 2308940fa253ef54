"""The template context: everything the report templates may use, documented field by field.

:class:`ReportContext` is the contract between the build and the templates (built-in and a
company's override templates alike).  Each field carries a ``help`` text in its metadata;
``tests/render/test_context.py`` checks that every field is documented and that the
templates use no name outside this contract.

The context holds raw numbers (floats, ints, ``None``); rounding happens only in the filters
(:mod:`reportgen.render.filters`).  Measures that do not apply to a study are absent from the
lists here, never zero.  Nothing in this module imports Jinja2, matplotlib or WeasyPrint.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import platform
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import Any

from ..model import Ratings, Study
from .conventions import report_conventions
from .measures import BIBLIOGRAPHY, GLOSSARY, MEASURES
from .plainwords import formula_html, plain_text
from .readings import read_measure

#: report sections, with the names of /shared/VOCABULARY.md, in the order of its direction for
#: this version: the core (verdict, study, raters, panel, categories, criteria and sign-off) and
#: then what a reader looks up (the method statement and the appendix)
SECTIONS: tuple[tuple[str, str], ...] = (
    ("summary", "Summary and verdict"),
    ("scope", "Scope"),
    ("design", "Study design"),
    ("integrity", "Data integrity"),
    ("repeatability", "Rater repeatability"),
    ("accuracy", "Rater accuracy"),
    ("reproducibility", "Rater-to-rater reproducibility"),
    ("panel", "Panel accuracy"),
    ("confusion", "Category confusion"),
    ("ordinal", "Ordered-scale agreement"),
    ("hard-items", "Hard items"),
    ("certification", "Inspector certification"),
    ("signoff", "Sign-off"),
    ("caveats", "Reading the coefficients"),
    ("method", "Method statement"),
    ("appendix", "Appendix"),
)

SAFETY_CAUTION = (
    "This characteristic is safety-related. The study supports, and does not replace, the "
    "customer's requirements, the applicable codes and standards, and the judgement of qualified "
    "people, who decide whether this inspection may be relied on."
)

#: the order in which multi-rater coefficients are listed
REPRO_ORDER = (
    "agreement",
    "fleiss_kappa",
    "krippendorff_alpha",
    "krippendorff_alpha_interval",
    "gwet_ac1",
    "gwet_ac2",
    "conger_kappa",
    "light_kappa",
    "brennan_prediger",
    "kendall_w",
)
ACCURACY_ORDER = (
    "agreement",
    "effectiveness",
    "exact_agreement",
    "within_one_agreement",
    "cohen_kappa",
    "weighted_kappa",
    "miss_rate",
    "false_alarm_rate",
    "kendall_tau_b",
)
PANEL_ORDER = (
    "agreement",
    "effectiveness",
    "exact_agreement",
    "within_one_agreement",
    "miss_rate",
    "false_alarm_rate",
)
REPEAT_ORDER = ("agreement", "fleiss_kappa")

LABELS = {
    "agreement": "Agreement rate",
    "exact": "Exact agreement",
    "within_one_step": "Within one step",
    "mean_offset": "Mean signed offset (steps)",
}

RATINGS_TABLE_LIMIT = 400  # items shown in the appendix ratings table; the full file is attached


def _help(text: str) -> Any:
    return field(metadata={"help": text})


@dataclass(frozen=True)
class ReportContext:
    """Everything a report template sees (``{{ name }}`` for each field below)."""

    study: dict[str, Any] = _help(
        "The study definition: id, title, purpose, characteristic, station, revision, date, scale, "
        "safety_related, paper, trials, confidence, interval, bootstrap {resamples, seed}, weights "
        "(text), target_half_width, defect_category ({code, label} or None), categories "
        "[{index, code, label, value, description}], raters [{id, name, display}], signoff "
        "{prepared_by, reviewed_by, approved_by}, reference_source (text), criteria_source (the "
        "source text of the criteria judged, else the study definition's), key_used (bool), "
        "key_name (file name of the plan key or None)."
    )
    results: dict[str, Any] = _help(
        "The results JSON exactly as written to results.json (schema reportgen-results/1); records M "
        "hold estimate, se, ci_low, ci_high, ci_method, p_value, items, agreeing."
    )
    verdict: dict[str, Any] | None = _help(
        "The study verdict or None when no criteria were judged: {outcome: 'PASS'|'IMPROVE', "
        "sentence, marginal_is, source, rules: [criterion rows]}; a criterion row is {measure, label, "
        "rater, judge, value, pass_level, marginal_level, better, outcome, margin, note}."
    )
    deciding: list[dict[str, Any]] = _help(
        "The three or four figures that decide the verdict, for the first page: {label, m (record M), "
        "kind, reading, outcome (criterion outcome or None)}."
    )
    sections: list[dict[str, Any]] = _help(
        "The sections shown, in report order: {anchor, number, title}. Ordered-scale agreement only "
        "for ordinal scales."
    )
    method: list[dict[str, Any]] = _help(
        "Method statement, one entry per measure present in the results: {key, name, formula "
        "(list of lines), why, sources (list of bibliography texts), where (sections using it)}."
    )
    conventions: list[dict[str, str]] = _help(
        "Counting conventions from the results: {topic, text}."
    )
    interval_text: str = _help(
        "How intervals were computed, with level, method, resamples and seed (one paragraph)."
    )
    size_words: list[dict[str, str]] = _help(
        "Published scales used for the size words of coefficients: {scale, applies_to, "
        "cut_points, source}; with size_words_note saying the words are conventions."
    )
    size_words_note: str = _help(
        "One sentence: the size words are conventions of the named scales; the criteria decide."
    )
    repeatability: list[dict[str, Any]] = _help(
        "Per rater (absent when there is one trial): {rater (rater dict), mixed_calls, items, measures: "
        "[{key, name, m, reading}]}."
    )
    accuracy: list[dict[str, Any]] = _help(
        "Per rater (absent without reference): {rater, counts, measures: [{key, name, m, reading}]}."
    )
    reproducibility: list[dict[str, Any]] = _help(
        "Multi-rater measures present (absent with one rater): [{key, name, m, reading}]."
    )
    by_category: list[dict[str, Any]] = _help(
        "Fleiss' kappa per category: [{code, label, m, reading}] (empty when not computed)."
    )
    pairwise: dict[str, Any] | None = _help(
        "Pairwise Cohen's kappa between raters: {raters: [rater dicts], rows: [[record M or None]]} or None."
    )
    by_trial: list[dict[str, Any]] = _help(
        "Reproducibility per trial: [{trial, measures: [{key, name, m, reading}]}]."
    )
    panel: list[dict[str, Any]] = _help(
        "Panel accuracy measures present: [{key, name, m, reading}]."
    )
    confusion: list[dict[str, Any]] = _help(
        "Per rater confusion table against the reference: {rater, labels, rows (reference category) × "
        "columns (rating) counts, total, on_diagonal, top_mixups: [{reference, rated, count}]}."
    )
    ordinal: dict[str, Any] | None = _help(
        "Ordered-scale agreement (ordinal scales only) or None: {steps (list of signed steps), rows: "
        "[{rater, exact, within_one_step, mean_offset, offsets: [counts per step]}], panel (same or None), "
        "pairs: {pairs, exact_share, within_one_step_share, steps_apart}}."
    )
    hard_items: list[dict[str, Any]] = _help(
        "Hard items, least agreement first: {id, reference (label or None), agreement, ratings, "
        "matching_reference, counts_text}."
    )
    caveats: list[dict[str, Any]] = _help("Caveats computed for this study: [{title, text}].")
    certification: list[dict[str, Any]] = _help(
        "One block per inspector: {rater, outcome ('certified'|'not certified'|None), reasons (list), "
        "date, valid_until, rules: [criterion rows]}."
    )
    actions: list[str] = _help("Recommended next steps, most effective first.")
    warnings: list[dict[str, str]] = _help("Warnings raised by the analysis: [{measure, message}].")
    sources: list[dict[str, Any]] = _help(
        "Input files: {role, name, sha256, size, rows, encoding, delimiter, layout}."
    )
    completeness: dict[str, Any] = _help(
        "Ratings completeness: {expected_ratings, ratings, missing, missing_share, items_with_missing}."
    )
    software: list[dict[str, str]] = _help("Software versions used: [{name, version}].")
    charts: dict[str, Any] = _help(
        "Charts by name (rater_figures, confusion, by_category, steps_apart, item_map), each with "
        "data_uri, title, alt, note, filename; a chart that does not apply is absent."
    )
    ratings_table: dict[str, Any] = _help(
        "Appendix ratings table: {columns (rater-trial headings), rows: [{item, cells, reference}], "
        "truncated (bool), total_items}."
    )
    bibliography: list[dict[str, str]] = _help("Bibliography of the methods used: [{key, text}].")
    glossary: list[dict[str, str]] = _help("Glossary: [{term, meaning}].")
    generated_at: str = _help(
        "Build time, ISO 8601 UTC (from --generated-at or SOURCE_DATE_EPOCH)."
    )
    draft: bool = _help("True when built with --replace: DRAFT is printed on every page.")
    safety_caution: str | None = _help(
        "The safety caution text for safety-related studies, else None."
    )
    running_head: str = _help("Running page header text: study id, revision, verdict.")
    templates: dict[str, Any] = _help(
        "Templates in use: {override (the study's override folder name, or None), files (override "
        "files found there, sorted)}."
    )
    font_css: str = _help(
        "The @font-face rules (shipped fonts as data: URIs); filled in by html.py."
    )
    criteria: dict[str, Any] | None = _help(
        "The acceptance criteria as judged, or None when the study sets none: {set (name of a "
        "shipped criteria set or None), title, source (text), cautions (list of texts), "
        "marginal_is, zero_failure (text or None), left_out: [{measure, label, reason}] (rules of "
        "a shipped set that do not apply to this study)}."
    )
    plan: dict[str, Any] | None = _help(
        "The plan summary reportgen plan recorded for this study, or None when none was found: "
        "{seed, seed_source, blinding, order, gap (texts), trial_dates: [{trial, date}], "
        "revision (the study revision it was made for), items, run_sheets, key_used (bool: the "
        "ratings were decoded with a plan key)}."
    )
    core_hard_items: int = field(
        default=10,
        metadata={
            "help": "How many hard items the core of the report lists; the appendix lists them all."
        },
    )


def context_help() -> dict[str, str]:
    """Field name → help text (for the README and the contract test)."""
    return {f.name: f.metadata["help"] for f in fields(ReportContext)}


# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------


def _is_record(x: Any) -> bool:
    return isinstance(x, Mapping) and "estimate" in x


def _row(key: str, m: Mapping[str, Any], name: str | None = None) -> dict[str, Any]:
    info = MEASURES.get(key)
    return {
        "key": key,
        "name": name or LABELS.get(key) or (info.name if info else key.replace("_", " ")),
        "m": dict(m),
        "reading": read_measure(m, key),
    }


def _rows(entry: Mapping[str, Any] | None, order: Sequence[str]) -> list[dict[str, Any]]:
    if not entry:
        return []
    return [_row(k, entry[k]) for k in order if k in entry and _is_record(entry[k])]


def _sha256(path: Path) -> str | None:
    try:
        return hashlib.sha256(path.read_bytes()).hexdigest()
    except OSError:
        return None


def _versions() -> list[dict[str, str]]:
    from importlib.metadata import PackageNotFoundError, version

    out = [{"name": "Python", "version": platform.python_version()}]
    for dist in (
        "reportgen",
        "numpy",
        "scipy",
        "Jinja2",
        "matplotlib",
        "weasyprint",
        "pydyf",
        "fonttools",
    ):
        try:
            out.append({"name": dist, "version": version(dist)})
        except PackageNotFoundError:
            continue
    return out


def rater_dicts(study: Study) -> dict[str, dict[str, str]]:
    out = {}
    for r in study.raters:
        display = r.name if r.name == r.id else f"{r.name} ({r.id})"
        out[r.id] = {"id": r.id, "name": r.name, "display": display}
    return out


def study_dict(study: Study, ratings: Ratings | None) -> dict[str, Any]:
    cats = [
        {
            "index": i,
            "code": c.code,
            "label": c.label,
            "value": c.value,
            "description": c.description,
        }
        for i, c in enumerate(study.categories)
    ]
    defect = None
    if study.defect_category is not None:
        label = next(
            (c.label for c in study.categories if c.code == study.defect_category),
            study.defect_category,
        )
        defect = {"code": study.defect_category, "label": label}
    if isinstance(study.weights, str):
        weights = study.weights
    else:
        weights = "user-defined matrix: " + "; ".join(
            " ".join(f"{w:g}" for w in row) for row in study.weights
        )
    if study.reference_path is not None:
        ref_source = f"reference file {study.reference_path.name}"
    elif ratings is not None and ratings.has_reference:
        ref_source = "reference column in the ratings file"
    else:
        ref_source = "no reference: accuracy against a reference is not part of this study"
    criteria_source = None
    if isinstance(study.criteria, Mapping):
        criteria_source = study.criteria.get("source") or (
            f"shipped criteria set '{study.criteria['set']}'" if "set" in study.criteria else None
        )
    return {
        "id": study.id,
        "title": study.title,
        "purpose": study.purpose,
        "characteristic": study.characteristic,
        "station": study.station,
        "revision": study.revision,
        "date": study.date.isoformat() if study.date else None,
        "scale": study.scale,
        "safety_related": study.safety_related,
        "paper": study.paper,
        "trials": study.trials,
        "confidence": study.confidence,
        "interval": study.proportion_interval,
        "bootstrap": {"resamples": study.bootstrap_resamples, "seed": study.bootstrap_seed},
        "weights": weights,
        "target_half_width": study.target_half_width,
        "defect_category": defect,
        "categories": cats,
        "raters": list(rater_dicts(study).values()),
        "signoff": {
            "prepared_by": study.signoff.prepared_by,
            "reviewed_by": study.signoff.reviewed_by,
            "approved_by": study.signoff.approved_by,
        },
        "reference_source": ref_source,
        "criteria_source": criteria_source,
        "key_used": study.key_path is not None,
        "key_name": study.key_path.name if study.key_path is not None else None,
    }


# --------------------------------------------------------------------------------------------
# verdict, criteria, certification (tolerant of the verdict module's exact shapes)
# --------------------------------------------------------------------------------------------


def _first(d: Mapping[str, Any], *keys: str, default: Any = None) -> Any:
    for k in keys:
        if k in d and d[k] is not None:
            return d[k]
    return default


def _measure_label(path: str) -> str:
    parts = str(path).split(".")
    last = parts[-1] if parts else str(path)
    info = MEASURES.get(last)
    name = LABELS.get(last) or (info.name if info else last.replace("_", " "))
    group = (
        {
            "repeatability": "repeatability",
            "accuracy": "accuracy",
            "reproducibility": "rater-to-rater",
            "panel_accuracy": "panel",
        }.get(parts[0], parts[0])
        if parts
        else ""
    )
    return f"{name} ({group})" if group else name


def _criterion_rows(raw: Any, raters: Mapping[str, Mapping[str, str]]) -> list[dict[str, Any]]:
    if isinstance(raw, Mapping):
        raw = _first(raw, "rules", "outcomes", "results", default=[])
    rows: list[dict[str, Any]] = []
    for r in raw or []:
        if not isinstance(r, Mapping):
            continue
        measure = str(_first(r, "measure", "path", default=""))
        rater = _first(r, "rater", "rater_id")
        if rater is None and measure.count(".") >= 2 and measure.split(".")[1] in raters:
            rater = measure.split(".")[1]
        rows.append(
            {
                "measure": measure,
                "label": _measure_label(measure),
                "rater": raters.get(str(rater), {"id": rater, "name": rater, "display": rater})
                if rater
                else None,
                "judge": _first(r, "judge", default="estimate"),
                "value": _first(r, "value", "judged", "judged_value"),
                "estimate": _first(r, "estimate"),
                "pass_level": _first(r, "pass", "pass_level"),
                "marginal_level": _first(r, "marginal", "marginal_level"),
                "better": _first(r, "better", default="higher"),
                "outcome": _first(r, "outcome", "result", default=None),
                "margin": _first(r, "margin"),
                "note": _first(r, "note", "message", default=None)
                or (_first(r["settle"], "text") if isinstance(r.get("settle"), Mapping) else None),
                "kind": MEASURES[measure.split(".")[-1]].kind
                if measure.split(".")[-1] in MEASURES
                else "coefficient",
            }
        )
    return rows


def verdict_view(
    results: Mapping[str, Any], raters: Mapping[str, Mapping[str, str]]
) -> dict[str, Any] | None:
    v = results.get("verdict")
    if v is None:
        return None
    crit = results.get("criteria")
    checks: Any = None
    if isinstance(v, Mapping):
        if _first(v, "outcome", "verdict") is None:
            return None  # no criteria set: no verdict
        outcome = str(_first(v, "outcome", "verdict", default="")).upper()
        sentence = _first(v, "sentence", "summary", "text")
        marginal_is = _first(v, "marginal_is")
        checks = _first(v, "rules", "checks")
    else:
        outcome, sentence, marginal_is = str(v).upper(), None, None
    if isinstance(crit, Mapping):
        marginal_is = marginal_is or crit.get("marginal_is")
        if checks is None:
            checks = _first(crit, "checks", "outcomes", "rules")
    rules = _criterion_rows(checks, raters)
    source = crit.get("source") if isinstance(crit, Mapping) else None
    if not sentence:
        short = [r for r in rules if r["outcome"] == "short"]
        marg = [r for r in rules if r["outcome"] == "marginal"]
        if outcome == "PASS":
            sentence = f"The inspection meets all {len(rules)} acceptance criteria" + (
                f" ({len(marg)} marginal, counted as pass)." if marg else "."
            )
        else:
            sentence = (
                f"The inspection must improve: {len(short)} of {len(rules)} criteria fall short"
                + (f" and {len(marg)} are marginal." if marg else ".")
            )
    return {
        "outcome": outcome,
        "sentence": sentence,
        "marginal_is": marginal_is,
        "source": source,
        "rules": rules,
    }


def certification_view(
    results: Mapping[str, Any], study: Study, raters: Mapping[str, Mapping[str, str]]
) -> list[dict[str, Any]]:
    raw = results.get("certification")
    per: dict[str, Mapping[str, Any]] = {}
    if isinstance(raw, Mapping):
        inner = _first(raw, "inspectors", "raters", default=None)
        if isinstance(inner, Mapping):
            per = {str(k): v for k, v in inner.items() if isinstance(v, Mapping)}
        elif isinstance(inner, list):
            per = {
                str(_first(x, "rater", "id", "rater_id")): x
                for x in inner
                if isinstance(x, Mapping)
            }
        else:
            per = {str(k): v for k, v in raw.items() if isinstance(v, Mapping) and str(k) in raters}
    elif isinstance(raw, list):
        per = {str(_first(x, "rater", "id", "rater_id")): x for x in raw if isinstance(x, Mapping)}
    blocks = []
    for rid, rater in raters.items():
        c = per.get(rid, {})
        reasons = _first(c, "reasons", "why", default=[])
        if isinstance(reasons, str):
            reasons = [reasons]
        blocks.append(
            {
                "rater": rater,
                "outcome": _first(c, "outcome", "status", "result"),
                "reasons": [
                    str(x)
                    if not isinstance(x, Mapping)
                    else str(_first(x, "text", "message", default=x))
                    for x in reasons
                ],
                "date": _first(
                    c,
                    "date",
                    "certified_on",
                    default=study.date.isoformat() if study.date else None,
                ),
                "valid_until": _first(c, "valid_until", "expires"),
                "rules": _criterion_rows(
                    _first(c, "checks", "rules", "criteria", default=[]), raters
                ),
            }
        )
    return blocks


def actions_view(results: Mapping[str, Any]) -> list[str]:
    out = []
    for a in results.get("actions") or []:
        if isinstance(a, Mapping):
            text = _first(a, "text", "action", "message", "summary")
            if text:
                out.append(str(text))
        elif a:
            out.append(str(a))
    return out


def deciding_view(
    results: Mapping[str, Any], verdict: Mapping[str, Any] | None
) -> list[dict[str, Any]]:
    """Three or four figures for the first page."""
    picked: list[dict[str, Any]] = []
    if verdict and verdict["rules"]:
        rank = {"short": 0, "marginal": 1, "meets": 2}
        seen: set[str] = set()
        for r in sorted(
            verdict["rules"], key=lambda r: (rank.get(str(r["outcome"]), 3), r["measure"])
        ):
            m = _lookup(results, r["measure"])
            if m is None or r["measure"] in seen:
                continue
            seen.add(r["measure"])
            label = r["label"] + (f" — {r['rater']['display']}" if r["rater"] else "")
            picked.append(
                {
                    "label": label,
                    "m": m,
                    "kind": r["kind"],
                    "reading": read_measure(m, r["measure"].split(".")[-1]),
                    "outcome": r["outcome"],
                }
            )
            if len(picked) == 4:
                return picked
    for path in (
        "reproducibility.fleiss_kappa",
        "panel_accuracy.agreement",
        "panel_accuracy.effectiveness",
        "panel_accuracy.miss_rate",
        "reproducibility.agreement",
    ):
        if len(picked) >= 4:
            break
        m = _lookup(results, path)
        if m is None or any(p["m"] is m for p in picked):
            continue
        key = path.split(".")[-1]
        picked.append(
            {
                "label": _measure_label(path),
                "m": m,
                "kind": MEASURES[key].kind if key in MEASURES else "proportion",
                "reading": read_measure(m, key),
                "outcome": None,
            }
        )
    if len(picked) < 3:
        reps = results.get("repeatability") or {}
        worst = None
        for rid, e in reps.items():
            est = (e.get("agreement") or {}).get("estimate")
            if est is not None and (worst is None or est < worst[1]):
                worst = (rid, est)
        if worst:
            m = reps[worst[0]]["agreement"]
            picked.append(
                {
                    "label": f"Lowest rater repeatability ({worst[0]})",
                    "m": m,
                    "kind": "proportion",
                    "reading": read_measure(m, "agreement"),
                    "outcome": None,
                }
            )
    return picked[:4]


def _lookup(results: Mapping[str, Any], path: str) -> dict[str, Any] | None:
    cur: Any = results
    for part in str(path).split("."):
        if not isinstance(cur, Mapping) or part not in cur:
            return None
        cur = cur[part]
    return dict(cur) if _is_record(cur) else None


# --------------------------------------------------------------------------------------------
# sections
# --------------------------------------------------------------------------------------------


def _method(results: Mapping[str, Any]) -> list[dict[str, Any]]:
    where: dict[str, list[str]] = {}

    def note(key: str, section: str) -> None:
        if key in MEASURES and section not in where.setdefault(key, []):
            where[key].append(section)

    for _rid, e in (results.get("repeatability") or {}).items():
        for k in e:
            note(k, "Rater repeatability")
    for _rid, e in (results.get("accuracy") or {}).items():
        for k in e:
            note(k, "Rater accuracy")
    for k in results.get("reproducibility") or {}:
        note(k, "Rater-to-rater reproducibility")
    for k in results.get("panel_accuracy") or {}:
        note(k, "Panel accuracy")
    out = []
    for key, info in MEASURES.items():
        if key not in where:
            continue
        out.append(
            {
                "key": key,
                "name": info.name,
                "formula": [formula_html(line) for line in info.formula],
                "why": info.why,
                "sources": [BIBLIOGRAPHY[s] for s in info.source],
                "where": where[key],
            }
        )
    return out


def _keys_present(results: Mapping[str, Any]) -> frozenset[str]:
    """Measure keys present anywhere in the per-rater, panel and reproducibility figures."""
    keys: set[str] = set()
    for group in ("repeatability", "accuracy"):
        for e in (results.get(group) or {}).values():
            if isinstance(e, Mapping):
                keys |= {k for k, v in e.items() if _is_record(v)}
    for group in ("reproducibility", "panel_accuracy"):
        e = results.get(group) or {}
        keys |= {k for k, v in e.items() if _is_record(v) or k == "fleiss_kappa_by_category"}
    return frozenset(keys)


def _interval_text(study: Study, results: Mapping[str, Any]) -> str:
    level = f"{100 * study.confidence:g} %"
    prop = (
        "Clopper–Pearson (exact)"
        if study.proportion_interval == "clopper-pearson"
        else "Wilson (score)"
    )
    boot = results.get("bootstrap") or {}
    text = f"All intervals are two-sided {level} intervals. Proportions use the {prop} interval."
    if study.bootstrap_resamples > 0:
        method = boot.get("ci_method") or "bootstrap"
        text += (
            f" Coefficients use a bootstrap over items ({study.bootstrap_resamples} resamples, seed "
            f"{study.bootstrap_seed}, {method}): each resample draws items with all their ratings, so the "
            "interval reflects the items chosen, not only the raters."
        )
    else:
        text += " Coefficients use their published analytic (non-null) standard errors; no bootstrap was run."
    text += " p-values test against chance agreement with the published null variance."
    rate = ((results.get("design") or {}).get("rate_intervals") or {}).get("text")
    if rate:
        text += " " + str(rate)
    return text


def _confusion(
    results: Mapping[str, Any], study: Study, raters: Mapping[str, Mapping[str, str]]
) -> list[dict[str, Any]]:
    labels_by_code = {c.code: c.label for c in study.categories}
    out = []
    for rid, e in (results.get("accuracy") or {}).items():
        conf = e.get("confusion")
        if not isinstance(conf, Mapping) or "counts" not in conf:
            continue
        codes = list(conf.get("categories") or study.category_codes)
        counts = [list(map(int, row)) for row in conf["counts"]]
        if conf.get("rows") == "rater":  # stored rater × reference: show reference × rating
            counts = [list(col) for col in zip(*counts, strict=True)] if counts else counts
        k = len(codes)
        mix = [
            {
                "reference": labels_by_code.get(codes[i], codes[i]),
                "rated": labels_by_code.get(codes[j], codes[j]),
                "count": counts[i][j],
            }
            for i in range(k)
            for j in range(k)
            if i != j and counts[i][j] > 0
        ]
        mix.sort(key=lambda x: -x["count"])
        out.append(
            {
                "rater": raters.get(rid, {"id": rid, "name": rid, "display": rid}),
                "labels": [labels_by_code.get(c, c) for c in codes],
                "rows": counts,
                "total": sum(map(sum, counts)),
                "on_diagonal": sum(counts[i][i] for i in range(k)),
                "top_mixups": mix[:3],
            }
        )
    return out


def _ordinal(
    results: Mapping[str, Any], study: Study, raters: Mapping[str, Mapping[str, str]]
) -> dict[str, Any] | None:
    o = results.get("ordinal")
    if study.scale != "ordinal" or not isinstance(o, Mapping):
        return None
    k = len(study.categories)
    steps = list(range(-(k - 1), k))

    def row(e: Mapping[str, Any], rater: Any) -> dict[str, Any]:
        offsets = e.get("offsets") or {}
        return {
            "rater": rater,
            "exact": e.get("exact"),
            "within_one_step": e.get("within_one_step"),
            "mean_offset": e.get("mean_offset"),
            "offsets": [int(offsets.get(str(s), 0)) for s in steps],
        }

    rows = [
        row(e, raters.get(rid, {"id": rid, "name": rid, "display": rid}))
        for rid, e in (o.get("accuracy") or {}).items()
    ]
    panel = (
        row(o["panel_accuracy"], {"id": "panel", "name": "Panel", "display": "Panel (all raters)"})
        if isinstance(o.get("panel_accuracy"), Mapping)
        else None
    )
    pairs = o.get("reproducibility")
    pair_view = None
    if isinstance(pairs, Mapping):
        sa = pairs.get("steps_apart") or {}
        pair_view = {
            "pairs": pairs.get("pairs"),
            "exact_share": pairs.get("exact_share"),
            "within_one_step_share": pairs.get("within_one_step_share"),
            "steps_apart": [
                {"steps": int(s), "count": int(c)}
                for s, c in sorted(sa.items(), key=lambda x: int(x[0]))
            ],
        }
    return {"steps": steps, "rows": rows, "panel": panel, "pairs": pair_view}


def _hard_items(results: Mapping[str, Any], study: Study) -> list[dict[str, Any]]:
    labels = {c.code: c.label for c in study.categories}
    items = {str(it.get("id")): it for it in results.get("items") or [] if isinstance(it, Mapping)}
    out = []
    for iid in results.get("hard_items") or []:
        it = items.get(str(iid))
        if it is None:
            continue
        counts = it.get("counts") or {}
        text = ", ".join(f"{labels.get(c, c)} × {n}" for c, n in counts.items() if n)
        out.append(
            {
                "id": str(iid),
                "reference": labels.get(it.get("reference"), it.get("reference"))
                if it.get("reference") is not None
                else None,
                "agreement": it.get("agreement"),
                "ratings": it.get("ratings"),
                "matching_reference": it.get("matching_reference"),
                "counts_text": text,
            }
        )
    return out


def _pct(x: Any) -> str:
    from .filters import fmt_pct

    return fmt_pct(x)


def _num(x: Any, digits: int = 2) -> str:
    from .filters import fmt_num

    return fmt_num(x, digits)


def _caveats(
    results: Mapping[str, Any], study: Study, raters: Mapping[str, Mapping[str, str]]
) -> list[dict[str, str]]:
    cav = results.get("caveats") or {}
    labels = {c.code: c.label for c in study.categories}
    out: list[dict[str, str]] = []
    k = cav.get("categories")
    used = cav.get("categories_used")
    shares = cav.get("reference_shares") or cav.get("category_shares") or {}
    if k is not None:
        share_text = ", ".join(f"{labels.get(c, c)} {_pct(s)}" for c, s in shares.items())
        which = "reference categories" if cav.get("reference_shares") else "ratings"
        text = (
            f"The scale has {k} categories, {used} of which were used. The {which} split as follows: "
            f"{share_text}. Kappa-type coefficients compare agreement with the agreement these "
            "frequencies alone would give; when one category dominates, chance agreement is high and "
            "kappa can be low even when raters mostly agree."
        )
        out.append({"title": "Categories and prevalence", "text": text})
    rep = cav.get("reproducibility")
    if isinstance(rep, Mapping) and rep.get("observed_agreement") is not None:
        out.append(
            {
                "title": "Chance agreement among raters",
                "text": (
                    f"Pairs of ratings of the same item agree {_pct(rep['observed_agreement'])} of the time; "
                    f"chance alone would give {_pct(rep.get('chance_agreement'))}. Fleiss' kappa measures "
                    "the part of the remaining room that the raters actually achieve."
                ),
            }
        )
    for rid, e in (cav.get("accuracy") or {}).items():
        if not isinstance(e, Mapping):
            continue
        name = raters.get(rid, {}).get("display", rid)
        parts = [
            f"observed agreement with the reference {_pct(e.get('observed_agreement'))}, chance agreement {_pct(e.get('chance_agreement'))}"
        ]
        if e.get("kappa_max") is not None:
            parts.append(
                f"the highest kappa these category frequencies allow is {_num(e['kappa_max'])}, so kappa cannot reach 1 "
                "unless the rater uses the categories as often as the reference does"
                if e["kappa_max"] < 0.999
                else "the category frequencies allow a kappa of 1"
            )
        if e.get("pabak") is not None:
            parts.append(
                f"prevalence index {_num(e.get('prevalence_index'))}, bias index {_num(e.get('bias_index'))}, "
                f"prevalence- and bias-adjusted kappa (PABAK) {_num(e['pabak'])}"
            )
        out.append({"title": f"Kappa bounds for {name}", "text": "; ".join(parts) + "."})
    prec = cav.get("precision")
    if isinstance(prec, Mapping) and prec.get("half_width") is not None:
        need = prec.get("items_needed")
        text = (
            f"The interval of {_measure_label(str(prec.get('measure')))} is ±{_num(prec['half_width'])} wide "
            f"with {prec.get('items')} items. "
        )
        if need is not None and prec.get("target_half_width") is not None:
            if need > (prec.get("items") or 0):
                text += (
                    f"A half-width of ±{_num(prec['target_half_width'])} would need about {need} items "
                    "(scaled from this study, assuming agreement and design stay the same)."
                )
            else:
                text += (
                    f"That is within the target half-width of ±{_num(prec['target_half_width'])}."
                )
        out.append({"title": "Interval width and sample size", "text": text})
    miss = cav.get("missing")
    if isinstance(miss, Mapping):
        if miss.get("missing"):
            text = (
                f"{miss['missing']} of {miss.get('expected_ratings')} ratings are missing "
                f"({_pct(miss.get('missing_share'))}, on {miss.get('items_with_missing')} items). Missing ratings are "
                "left out of every count, never treated as a category; if ratings are missing because items were "
                "hard, the figures are optimistic."
            )
        else:
            text = f"All {miss.get('expected_ratings')} ratings are present."
        out.append({"title": "Missing data", "text": text})
    return out


def _sources(study: Study, ratings: Ratings | None) -> list[dict[str, Any]]:
    out: list[dict[str, Any]] = []
    roles = {s.role for s in ratings.sources} if ratings else set()
    if "study" not in roles:
        try:
            size = study.path.stat().st_size
        except OSError:
            size = None
        out.append(
            {
                "role": "study",
                "name": study.path.name,
                "sha256": _sha256(study.path),
                "size": size,
                "rows": None,
                "encoding": None,
                "delimiter": None,
                "layout": None,
            }
        )
    for s in ratings.sources if ratings else ():
        out.append(
            {
                "role": s.role,
                "name": s.path.name,
                "sha256": s.sha256,
                "size": s.size,
                "rows": s.rows if s.role != "study" else None,
                "encoding": s.encoding,
                "delimiter": {",": "comma", ";": "semicolon", "\t": "tab"}.get(
                    s.delimiter or "", s.delimiter
                ),
                "layout": s.layout,
            }
        )
    return out


#: how the ratings appendix marks a rating that is missing
MISSING_MARK = "–"


def _natural_key(text: str) -> list[tuple[int, Any]]:
    """Sort key: "IT-2" before "IT-10"."""
    import re

    return [(0, int(p)) if p.isdigit() else (1, p) for p in re.split(r"(\d+)", text) if p]


def _ratings_table(
    ratings: Ratings | None, study: Study, results: Mapping[str, Any]
) -> dict[str, Any]:
    if ratings is None:
        return {
            "columns": [],
            "rows": [],
            "truncated": False,
            "total_items": 0,
            "missing_mark": MISSING_MARK,
        }
    codes = ratings.categories
    cols = [
        f"{r} t{t + 1}" if ratings.n_trials > 1 else r
        for r in ratings.raters
        for t in range(ratings.n_trials)
    ]
    rows = []
    n_show = min(ratings.n_items, RATINGS_TABLE_LIMIT)
    # in item order (numbers inside ids compared as numbers), whatever the order of the files
    order = sorted(range(ratings.n_items), key=lambda i: _natural_key(str(ratings.items[i])))
    for i in order[:n_show]:
        cells = [
            codes[c] if c >= 0 else MISSING_MARK for c in ratings.codes[i].reshape(-1).tolist()
        ]
        ref = None
        if ratings.reference is not None and int(ratings.reference[i]) >= 0:
            ref = codes[int(ratings.reference[i])]
        rows.append({"item": ratings.items[i], "cells": cells, "reference": ref})
    return {
        "columns": cols,
        "rows": rows,
        "truncated": ratings.n_items > n_show,
        "total_items": ratings.n_items,
        "missing_mark": MISSING_MARK,
        "has_reference": ratings.reference is not None,
    }


def criteria_view(results: Mapping[str, Any]) -> dict[str, Any] | None:
    """The judged criteria for the scope section: source, cautions, zero-failure size, left out."""
    crit = results.get("criteria")
    if not isinstance(crit, Mapping):
        return None
    zf = crit.get("zero_failure")
    left_out = [
        {
            "measure": str(x.get("measure")),
            "label": _measure_label(str(x.get("measure"))),
            "reason": str(x.get("reason") or "does not apply"),
        }
        for x in crit.get("left_out") or []
        if isinstance(x, Mapping)
    ]
    return {
        "set": crit.get("set"),
        "title": crit.get("title"),
        "source": crit.get("source"),
        "cautions": [str(c) for c in crit.get("cautions") or [] if c],
        "marginal_is": crit.get("marginal_is"),
        "zero_failure": zf.get("text") if isinstance(zf, Mapping) else None,
        "left_out": left_out,
    }


def plan_view(summary: Mapping[str, Any] | None, study: Study) -> dict[str, Any] | None:
    """The plan summary (``plan.json``) as the design section shows it, or None."""
    if not isinstance(summary, Mapping):
        return None
    design = summary.get("design") if isinstance(summary.get("design"), Mapping) else {}
    made_for = summary.get("study") if isinstance(summary.get("study"), Mapping) else {}
    return {
        "seed": summary.get("seed"),
        "seed_source": summary.get("seed_source"),
        "blinding": summary.get("blinding"),
        "order": summary.get("order"),
        "gap": summary.get("gap"),
        "trial_dates": [
            {"trial": d.get("trial"), "date": d.get("date")}
            for d in summary.get("trial_dates") or []
            if isinstance(d, Mapping)
        ],
        "revision": made_for.get("revision"),
        "items": design.get("items"),
        "run_sheets": design.get("run_sheets"),
        "key_used": study.key_path is not None,
    }


def build_context(
    study: Study,
    ratings: Ratings | None,
    results: Mapping[str, Any],
    *,
    generated_at: dt.datetime,
    draft: bool = False,
    charts: Mapping[str, Any] | None = None,
    plan: Mapping[str, Any] | None = None,
    software: list[dict[str, str]] | None = None,
) -> ReportContext:
    """Assemble the context from the study, its ratings and the (judged) results.

    ``plan`` is the study's plan summary (:func:`reportgen.plan.find_plan_summary`), if any.
    """
    from ..sizewords import CONVENTION_TEXT, statement
    from .readings import SIZE_SCALE

    SIZE_SCALE.set(study.size_words)  # the readings below use the study's scale
    raters = rater_dicts(study)
    criteria = criteria_view(results)
    study_view = study_dict(study, ratings)
    if criteria is not None and criteria["source"]:
        study_view["criteria_source"] = criteria["source"]
    verdict = verdict_view(results, raters)
    if verdict is not None and verdict.get("sentence"):
        verdict["sentence"] = plain_text(str(verdict["sentence"]), _measure_label, raters)
    sections = []
    for anchor, title in SECTIONS:
        if anchor == "ordinal" and study.scale != "ordinal":
            continue
        sections.append({"anchor": anchor, "number": len(sections) + 1, "title": title})
    repeat = [
        {
            "rater": raters.get(rid, {"id": rid, "name": rid, "display": rid}),
            "mixed_calls": e.get("mixed_calls"),
            "items": e.get("items"),
            "measures": _rows(e, REPEAT_ORDER),
        }
        for rid, e in (results.get("repeatability") or {}).items()
    ]
    acc = [
        {
            "rater": raters.get(rid, {"id": rid, "name": rid, "display": rid}),
            "counts": e.get("counts") or {},
            "measures": _rows(e, ACCURACY_ORDER),
        }
        for rid, e in (results.get("accuracy") or {}).items()
    ]
    repro_raw = results.get("reproducibility") or {}
    by_cat = [
        {
            "code": c.code,
            "label": c.label,
            "m": repro_raw["fleiss_kappa_by_category"][c.code],
            "reading": read_measure(repro_raw["fleiss_kappa_by_category"][c.code], "fleiss_kappa"),
        }
        for c in study.categories
        if c.code in (repro_raw.get("fleiss_kappa_by_category") or {})
    ]
    pairwise = None
    pw = repro_raw.get("pairwise_cohen_kappa")
    if isinstance(pw, Mapping) and pw:
        ids = [r for r in study.rater_ids if r in pw]
        pairwise = {
            "raters": [raters[r] for r in ids],
            "rows": [[(pw.get(a) or {}).get(b) if a != b else None for b in ids] for a in ids],
        }
    by_trial = [
        {"trial": t, "measures": _rows(e, REPRO_ORDER)}
        for t, e in sorted((repro_raw.get("by_trial") or {}).items(), key=lambda x: int(x[0]))
    ]
    conventions = report_conventions(results)
    miss = (results.get("caveats") or {}).get("missing") or {}
    completeness = {
        "expected_ratings": miss.get("expected_ratings"),
        "ratings": miss.get("ratings", (results.get("design") or {}).get("ratings")),
        "missing": miss.get("missing", (results.get("design") or {}).get("missing")),
        "missing_share": miss.get("missing_share"),
        "items_with_missing": miss.get("items_with_missing"),
    }
    method = _method(results)
    used_keys = {s for m in method for s in MEASURES[m["key"]].source}
    used_keys |= {"efron1993"} if study.bootstrap_resamples > 0 else set()
    used_keys |= (
        {"clopper1934"} if study.proportion_interval == "clopper-pearson" else {"wilson1927"}
    )
    if any(
        "pabak" in (e or {})
        for e in ((results.get("caveats") or {}).get("accuracy") or {}).values()
    ):
        used_keys |= {"byrt1993"}
    used_keys |= {"feinstein1990"}
    outcome = verdict["outcome"] if verdict else "no verdict"
    head = f"{study.id} · revision {study.revision} · {outcome}" + (" · DRAFT" if draft else "")
    return ReportContext(
        study=study_view,
        results=dict(results),
        verdict=verdict,
        deciding=deciding_view(results, verdict),
        sections=sections,
        method=method,
        conventions=conventions,
        interval_text=_interval_text(study, results),
        size_words=statement(study.size_words, frozenset(MEASURES) & _keys_present(results)),
        size_words_note=CONVENTION_TEXT,
        repeatability=repeat,
        accuracy=acc,
        reproducibility=_rows(repro_raw, REPRO_ORDER),
        by_category=by_cat,
        pairwise=pairwise,
        by_trial=by_trial,
        panel=_rows(results.get("panel_accuracy"), PANEL_ORDER),
        confusion=_confusion(results, study, raters),
        ordinal=_ordinal(results, study, raters),
        hard_items=_hard_items(results, study),
        caveats=_caveats(results, study, raters),
        certification=certification_view(results, study, raters),
        actions=[plain_text(a, _measure_label, raters) for a in actions_view(results)],
        warnings=[
            w if isinstance(w, Mapping) else {"measure": "", "message": str(w)}
            for w in results.get("warnings") or []
        ],
        sources=_sources(study, ratings),
        completeness=completeness,
        software=list(software) if software is not None else _versions(),
        charts=dict(charts or {}),
        ratings_table=_ratings_table(ratings, study, results),
        bibliography=[{"key": k, "text": BIBLIOGRAPHY[k]} for k in sorted(used_keys)],
        glossary=[{"term": t, "meaning": m} for t, m in GLOSSARY],
        generated_at=generated_at.astimezone(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        draft=draft,
        safety_caution=SAFETY_CAUTION if study.safety_related else None,
        running_head=head,
        templates=_templates(study),
        font_css="",
        criteria=criteria,
        plan=plan_view(plan, study),
    )


def _templates(study: Study) -> dict[str, Any]:
    folder = study.templates_path
    if folder is None:
        return {"override": None, "files": []}
    files = (
        sorted(p.name for p in Path(folder).iterdir() if p.is_file() and not p.is_symlink())
        if Path(folder).is_dir()
        else []
    )
    return {"override": Path(folder).name, "files": files}
