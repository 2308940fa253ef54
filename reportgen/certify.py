"""Certification held to the study's own evidence.

Small helpers used by :mod:`reportgen.verdict` (and ``reportgen check``):

* :func:`loosening_problems`: a certification rule may add a measure or tighten a level, never
  loosen a criterion on the same measure (an error naming both rules, file:line);
* :func:`independence_notes` / :func:`independence_problems`: a sign-off name (prepared,
  reviewed, approved) that is also a rater of the study;
* :func:`demonstrability_note` / :func:`rate_demonstrability`: a rate level the design cannot
  demonstrate.  With no event at all, n ratings show a rate of at most L with confidence C only
  when (1 - L)^n <= 1 - C, i.e. n >= ln(1 - C) / ln(1 - L) (the zero-failure or success-run
  relation; Clopper & Pearson 1934 one-sided bound for 0 of n).  Fewer ratings than that, or a
  level below one event in n, cannot be shown by this design whatever the raters do.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING, Any

from .errors import Location, Problem

if TYPE_CHECKING:  # pragma: no cover
    from .model import Ratings, Study
    from .verdict import Certification, Criteria, Rule

#: the rates whose levels can be out of reach of a design (better: lower, counted per rating)
RATE_MEASURES = ("miss_rate", "false_alarm_rate")
SIGNOFF_ROLES = (
    ("prepared_by", "prepared"),
    ("reviewed_by", "reviewed"),
    ("approved_by", "approved"),
)


def _level_text(rule: Rule) -> str:
    side = ">=" if rule.better == "higher" else "<="
    basis = "" if rule.judge == "estimate" else f", {rule.judge.replace('_', ' ')}"
    return f"{rule.info.label} {side} {rule.pass_level:g}{basis}"


def _looser(cert_rule: Rule, crit_rule: Rule) -> bool:
    """True when the certification rule asks less than the criterion on the same measure."""
    sign = 1.0 if crit_rule.better == "higher" else -1.0
    if cert_rule.better != crit_rule.better:
        return True
    if sign * (cert_rule.pass_level - crit_rule.pass_level) < -1e-12:
        return True
    # judging the estimate asks less than judging the unfavourable end of an interval
    return crit_rule.judge != "estimate" and cert_rule.judge == "estimate"


def _format_key(keys: Sequence[Any]) -> str:
    from .yamlio import format_key

    return format_key(keys)


def _where(study: Study, keys: Sequence[Any]) -> str:
    loc = study.locate(*keys)
    return f"{loc.path}:{loc.line}" if loc.line else str(loc.path)


def loosening_problems(study: Study, criteria: Criteria, cert: Certification) -> list[Problem]:
    """One error per certification rule that loosens a per-rater criterion on the same measure."""
    out: list[Problem] = []
    for cr in cert.rules:
        for k in criteria.rules:
            if (k.info.group, k.info.name) != (cr.info.group, cr.info.name) or not k.info.per_rater:
                continue
            if not _looser(cr, k):
                continue
            cert_keys = ["certification", "rules", cr.index - 1]
            crit_keys = (
                ["criteria", "set"]
                if criteria.set is not None
                else ["criteria", "rules", k.index - 1]
            )
            loc = study.locate(*cert_keys)
            out.append(
                Problem(
                    Location(loc.path, loc.line, loc.column, _format_key(cert_keys)),
                    f"certification rule {cr.index} ({_level_text(cr)}) is looser than criteria "
                    f"rule {k.index} ({_level_text(k)}) at {_where(study, crit_keys)}",
                    "certification rules may add measures or tighten levels, never loosen a "
                    "criterion: every criterion already applies to certification, so tighten "
                    "this rule or leave it out",
                )
            )
            break
    return out


def _norm(text: str) -> str:
    return " ".join(text.casefold().replace(",", " ").split())


def independence_notes(study: Study) -> list[dict[str, Any]]:
    """Sign-off names that are also raters of the study (by rater name or id)."""
    out = []
    for key, role in SIGNOFF_ROLES:
        signer = getattr(study.signoff, key, None)
        if not signer:
            continue
        words = f" {_norm(signer)} "
        for r in study.raters:
            names = [n for n in (r.name, r.id) if n]
            if any(f" {_norm(n)} " in words for n in names):
                shown = r.name or r.id
                out.append(
                    {
                        "rater": r.id,
                        "role": key,
                        "signer": signer,
                        "text": (
                            f"Not independent: {shown} ({r.id}) is a rater of this study and also "
                            f"{role} the report; have someone who did not rate the items "
                            f"{'prepare' if role == 'prepared' else role.removesuffix('d')} it."
                        ),
                    }
                )
    return out


def _signoff_location(study: Study, role: str) -> Location:
    loc = study.locate("signoff", role)
    return Location(loc.path, loc.line, loc.column, f"signoff.{role}")


def independence_problems(study: Study) -> list[Problem]:
    return [
        Problem(
            _signoff_location(study, n["role"]),
            n["text"],
            "the person judged by a study should not sign it off",
            "warning",
        )
        for n in independence_notes(study)
    ]


def rate_demonstrability(level: float, ratings: int, confidence: float) -> str | None:
    """Why a rate level (better: lower) cannot be shown with ``ratings`` ratings, or ``None``."""
    from .stats.proportion import zero_failure_sample_size

    if not (0.0 < level < 1.0) or ratings <= 0:
        return None
    needed = zero_failure_sample_size(1.0 - level, confidence)
    if ratings < needed:
        return (
            f"this design cannot show a rate of at most {level:g} with {confidence * 100:g} % "
            f"confidence: even with no event it takes {needed} ratings "
            f"(n = ln(1 - {confidence:g}) / ln({1.0 - level:g})), and there are {ratings}"
        )
    if 1.0 / ratings > level:
        return f"one event in {ratings} ratings already exceeds the level {level:g}"
    return None


def demonstrability_note(entry: Mapping[str, Any], confidence: float) -> str | None:
    """Note for a judged check of a rate, when its level is out of reach of the design."""
    name = str(entry.get("measure", "")).split(".")[-1]
    n = entry.get("items")
    if name not in RATE_MEASURES or not isinstance(n, int) or entry.get("better") != "lower":
        return None
    why = rate_demonstrability(float(entry["pass"]), n, confidence)
    return f"{entry['label']}: {why}" if why else None


def _rate_counts(study: Study, ratings: Ratings) -> dict[str, dict[str, int]]:
    """Per rater, the ratings behind the miss rate and the false alarm rate."""
    import numpy as np

    out: dict[str, dict[str, int]] = {}
    if ratings.reference is None or study.defect_category not in ratings.categories:
        return out
    d = ratings.categories.index(study.defect_category)
    ref = np.asarray(ratings.reference)
    for j, rid in enumerate(ratings.raters):
        rated = ratings.codes[:, j, :] >= 0
        out[rid] = {
            "miss_rate": int(rated[ref == d].sum()),
            "false_alarm_rate": int(rated[(ref >= 0) & (ref != d)].sum()),
        }
    return out


def demonstrability_problems(
    study: Study,
    ratings: Ratings,
    criteria: Criteria | None,
    cert: Certification | None,
) -> list[Problem]:
    """Warnings for rate rules whose levels the design cannot demonstrate (for ``check``)."""
    counts = _rate_counts(study, ratings)
    out: list[Problem] = []
    for block, keys in ((criteria, "criteria"), (cert, "certification")):
        if block is None:
            continue
        for rule in block.rules:
            if rule.info.name not in RATE_MEASURES or rule.better != "lower":
                continue
            conf = rule.confidence or study.confidence
            targets = sorted(counts) if rule.target in ("*", None) else [rule.target]
            by_why: dict[str, list[str]] = {}
            for rid in targets:
                n = counts.get(rid, {}).get(rule.info.name)
                why = rate_demonstrability(rule.pass_level, n, conf) if n else None
                if why is not None:
                    by_why.setdefault(why, []).append(rid)
            path = (
                [keys, "set"]
                if keys == "criteria" and getattr(block, "set", None) is not None
                else [keys, "rules", rule.index - 1]
            )
            loc = study.locate(*path)
            for why, rids in by_why.items():
                who = "rater" if len(rids) == 1 else "raters"
                out.append(
                    Problem(
                        Location(loc.path, loc.line, loc.column, _format_key(path)),
                        f"rule {rule.index} ({rule.info.label} <= {rule.pass_level:g}), "
                        f"{who} {', '.join(rids)}: {why}",
                        "add defect items or trials, or choose a level this design can show",
                        "warning",
                    )
                )
    return out


def criteria_reasons(checks: Sequence[Mapping[str, Any]], marginal_is: str) -> list[str]:
    """Reasons from the study's own per-rater criterion checks that stop a certification."""
    out = []
    for c in checks:
        if c["outcome"] == "meets" or (c["outcome"] == "marginal" and marginal_is == "pass"):
            continue
        if c.get("value") is None:
            out.append(f"criteria rule {c['rule']}: {c['label']} could not be judged")
            continue
        word = (
            "is marginal, which the criteria do not accept"
            if c["outcome"] == "marginal"
            else ("falls short")
        )
        side = "at least" if c["better"] == "higher" else "at most"
        out.append(
            f"criteria rule {c['rule']}: {c['label']} {c['value']:.3g} {word} "
            f"(pass level {side} {c['pass']:.3g}); the study's criteria apply to certification"
        )
    return out
