"""Measured reference values: intake and analyses (gauge performance curve, probability of
detection, disagreement zone).

A study may give each item a measured reference value (``measured_reference`` in the study
definition: an ``item,value`` file, the unit, and the lower and/or upper limit that turn a value
into accept/reject).  ``measured_results`` adds the ``measured`` block to the results.  The
numeric work is in ``stats/binomial_fit.py``, ``stats/gauge_curve.py``, ``stats/pod.py`` and
``stats/zone.py``.  Only the standard library and numpy are imported here.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from dataclasses import dataclass
from pathlib import Path
from statistics import NormalDist
from typing import Any

import numpy as np

from .errors import InputError, Location, Problem
from .model import Ratings, Study

MEASURED_KEYS = (
    "file",
    "unit",
    "lower_limit",
    "upper_limit",
    "analyses",
    "reject_set",
    "size_axis",
    "link",
)
ANALYSES = ("gauge_curve", "detection", "zone")
SIZE_AXES = ("linear", "log")
LINKS = ("logit", "probit")
CURVE_POINTS = 61


@dataclass(frozen=True)
class MeasuredSpec:
    path: Path
    unit: str
    lower: float | None
    upper: float | None
    analyses: tuple[str, ...]
    reject_set: tuple[str, ...]
    size_axis: str
    link: str
    values: dict[str, float]
    sha256: str
    rows: int


def _problem(study: Study, keys: tuple[Any, ...], message: str, hint: str | None = None) -> Problem:
    loc = study.locate("measured_reference", *keys)
    key = ".".join(["measured_reference", *(str(k) for k in keys)])
    return Problem(Location(loc.path, loc.line, loc.column, key), message, hint)


def _number(raw: Any) -> float | None:
    if isinstance(raw, bool) or not isinstance(raw, (int, float)):
        return None
    v = float(raw)
    return v if math.isfinite(v) else None


def load_measured(study: Study, ratings: Ratings | None = None) -> MeasuredSpec | None:
    """Validate ``measured_reference`` and read its value file; None when the study has none.

    Raises InputError naming file, line, column and field for every problem found.
    """
    raw = study.measured
    if raw is None:
        return None
    problems: list[Problem] = []
    if not isinstance(raw, dict):
        raise InputError(
            [_problem(study, (), "must be a mapping with file, unit and lower_limit/upper_limit")]
        )
    for k in sorted(set(raw) - set(MEASURED_KEYS), key=str):
        problems.append(
            _problem(study, (k,), f"unknown key {k!r}", "known keys: " + ", ".join(MEASURED_KEYS))
        )
    unit = raw.get("unit")
    if not isinstance(unit, str) or not unit.strip():
        problems.append(
            _problem(study, ("unit",), "the unit of the values is missing", "for example: unit: mm")
        )
    limits: dict[str, float | None] = {}
    for name in ("lower_limit", "upper_limit"):
        v = raw.get(name)
        limits[name] = _number(v)
        if v is not None and limits[name] is None:
            problems.append(_problem(study, (name,), f"must be a number, got {v!r}"))
    lower, upper = limits["lower_limit"], limits["upper_limit"]
    if raw.get("lower_limit") is None and raw.get("upper_limit") is None:
        problems.append(
            _problem(
                study, (), "give lower_limit, upper_limit or both: the limits decide accept/reject"
            )
        )
    if lower is not None and upper is not None and not lower < upper:
        problems.append(_problem(study, ("upper_limit",), "must be above lower_limit"))
    analyses_raw = raw.get("analyses", ["gauge_curve", "zone"])
    analyses: list[str] = []
    if not isinstance(analyses_raw, list) or not analyses_raw:
        problems.append(_problem(study, ("analyses",), "must be a list, e.g. [gauge_curve, zone]"))
    else:
        for i, a in enumerate(analyses_raw):
            if a not in ANALYSES:
                problems.append(
                    _problem(
                        study,
                        ("analyses", i),
                        f"unknown analysis {a!r}",
                        "one of: " + ", ".join(ANALYSES),
                    )
                )
            elif a not in analyses:
                analyses.append(a)
    size_axis = raw.get("size_axis", "linear")
    if size_axis not in SIZE_AXES:
        problems.append(
            _problem(
                study, ("size_axis",), f"must be one of {', '.join(SIZE_AXES)}, got {size_axis!r}"
            )
        )
    link = raw.get("link", "logit")
    if link not in LINKS:
        problems.append(
            _problem(study, ("link",), f"must be one of {', '.join(LINKS)}, got {link!r}")
        )
    codes = study.category_codes
    reject_raw = raw.get("reject_set")
    if reject_raw is None:
        reject: tuple[str, ...] = (study.defect_category,) if study.defect_category else ()
        if not reject:
            problems.append(
                _problem(
                    study,
                    (),
                    "name the categories that mean reject (reject_set), or use a binary scale with defect_category",
                )
            )
    else:
        if not isinstance(reject_raw, list) or not reject_raw:
            problems.append(_problem(study, ("reject_set",), "must be a list of category codes"))
            reject = ()
        else:
            reject = tuple(str(c) for c in reject_raw)
            for i, c in enumerate(reject):
                if c not in codes:
                    problems.append(
                        _problem(
                            study,
                            ("reject_set", i),
                            f"{c!r} is not a declared category code ({', '.join(codes)})",
                        )
                    )
    if "zone" in analyses and len(study.raters) < 2:
        problems.append(
            _problem(study, ("analyses",), "the disagreement zone needs two or more raters")
        )
    file_raw = raw.get("file")
    path: Path | None = None
    if not isinstance(file_raw, str) or not file_raw.strip():
        problems.append(_problem(study, ("file",), "the value file (item,value) is missing"))
    else:
        path = (study.path.parent / file_raw).resolve()
        if not path.is_file():
            problems.append(_problem(study, ("file",), f"file not found: {file_raw}"))
            path = None
    if problems:
        raise InputError(problems)
    assert path is not None and isinstance(unit, str)
    data = path.read_bytes()
    values, rows = _read_values(path, data)
    file_problems: list[Problem] = []
    shown = str(path)
    vals = np.array(list(values.values()))
    for name, lim in (("lower_limit", lower), ("upper_limit", upper)):
        if lim is not None and not vals.min() < lim < vals.max():
            file_problems.append(
                _problem(
                    study,
                    (name,),
                    f"the limit {lim:g} is outside the range of the values ({vals.min():g} to {vals.max():g} {unit})",
                    "the items must straddle each limit",
                )
            )
    if ratings is not None:
        rated = set(ratings.items)
        for item, line in sorted(_lines(path, data).items(), key=lambda t: t[1]):
            if item not in rated:
                file_problems.append(
                    Problem(
                        Location(shown, line, 1, "item"),
                        f"item {item!r} has a value but no ratings",
                    )
                )
        for item in ratings.items:
            if item not in values:
                file_problems.append(
                    Problem(
                        Location(shown, None, None, "item"),
                        f"item {item!r} has ratings but no value",
                    )
                )
    if file_problems:
        raise InputError(file_problems)
    return MeasuredSpec(
        path=path,
        unit=unit.strip(),
        lower=lower,
        upper=upper,
        analyses=tuple(analyses),
        reject_set=reject,
        size_axis=str(size_axis),
        link=str(link),
        values=values,
        sha256=hashlib.sha256(data).hexdigest(),
        rows=rows,
    )


def _text(path: Path, data: bytes) -> str:
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise InputError.single(
            str(path), f"not UTF-8 text ({exc.reason} at byte {exc.start})"
        ) from None


def _lines(path: Path, data: bytes) -> dict[str, int]:
    out: dict[str, int] = {}
    reader = csv.reader(io.StringIO(_text(path, data)))
    next(reader, None)
    for row in reader:
        if row and row[0].strip():
            out.setdefault(row[0].strip(), reader.line_num)
    return out


def _read_values(path: Path, data: bytes) -> tuple[dict[str, float], int]:
    shown = str(path)
    reader = csv.reader(io.StringIO(_text(path, data)))
    header = next(reader, None)
    if header is None:
        raise InputError.single(shown, "the value file is empty", line=1, hint="header: item,value")
    names = [h.strip().lower() for h in header]
    problems: list[Problem] = []
    for need in ("item", "value"):
        if need not in names:
            problems.append(
                Problem(
                    Location(shown, 1, 1, need),
                    f"no {need!r} column in the header",
                    "header: item,value",
                )
            )
    if problems:
        raise InputError(problems)
    ci, cv = names.index("item"), names.index("value")
    values: dict[str, float] = {}
    first: dict[str, int] = {}
    rows = 0
    for row in reader:
        line = reader.line_num
        if not any(c.strip() for c in row):
            continue
        rows += 1
        item = row[ci].strip() if ci < len(row) else ""
        text = row[cv].strip() if cv < len(row) else ""
        if not item:
            problems.append(Problem(Location(shown, line, ci + 1, "item"), "the item id is empty"))
            continue
        try:
            v = float(text)
            if not math.isfinite(v):
                raise ValueError
        except ValueError:
            problems.append(
                Problem(
                    Location(shown, line, cv + 1, "value"),
                    f"{text!r} is not a number",
                    "write the measured value, e.g. 10.012",
                )
            )
            continue
        if item in values:
            problems.append(
                Problem(
                    Location(shown, line, ci + 1, "item"),
                    f"item {item!r} has a second value (first on line {first[item]})",
                )
            )
            continue
        values[item] = v
        first[item] = line
    if not values and not problems:
        problems.append(Problem(Location(shown, 2, 1, "value"), "the value file holds no values"))
    if problems:
        raise InputError(problems)
    return values, rows


# --------------------------------------------------------------------------- analyses


def _side_items(spec: MeasuredSpec, v: np.ndarray) -> dict[str, tuple[float, np.ndarray]]:
    """Each limit with the items on its side (split at the middle of the tolerance)."""
    out: dict[str, tuple[float, np.ndarray]] = {}
    if spec.lower is not None and spec.upper is not None:
        mid = (spec.lower + spec.upper) / 2
        out["lower"] = (spec.lower, v < mid)
        out["upper"] = (spec.upper, v >= mid)
    elif spec.lower is not None:
        out["lower"] = (spec.lower, np.ones(v.size, bool))
    elif spec.upper is not None:
        out["upper"] = (spec.upper, np.ones(v.size, bool))
    return out


def _gauge_curve(
    spec: MeasuredSpec, v: np.ndarray, acc: np.ndarray, n: np.ndarray, level: float
) -> dict[str, Any]:
    from .stats.binomial_fit import fit_binomial
    from .stats.gauge_curve import Z995, analytic_method

    z = NormalDist().inv_cdf(0.5 + level / 2)
    out: dict[str, Any] = {}
    for side, (limit, sel) in _side_items(spec, v).items():
        rec: dict[str, Any] = {"limit": limit, "items": int(sel.sum())}
        try:
            a = analytic_method(v[sel], acc[sel], n[sel], limit, side)
            rec["analytic"] = {
                "slope": a.slope,
                "intercept": a.intercept,
                "items_between": a.points,
                "value_at_50": a.value_at_50,
                "bias": a.bias,
                "repeatability": a.repeatability,
                "t": a.t,
                "t_critical": a.t_critical,
                "bias_significant": a.bias_significant,
                "warnings": list(a.warnings),
                "refused": None,
            }
        except ValueError as exc:
            rec["analytic"] = {"refused": str(exc)}
        try:
            f = fit_binomial(v[sel], acc[sel], n[sel], "probit")
            at50 = f.quantile(0.5)
            se50 = f.quantile_se(0.5)
            bias = (limit - at50) if side == "lower" else (at50 - limit)
            rep = 2 * Z995 / abs(f.b1)
            rep_se = 2 * Z995 * math.sqrt(f.cov[1][1]) / f.b1**2
            grid = np.linspace(float(v[sel].min()), float(v[sel].max()), CURVE_POINTS)
            lo, hi = f.band(grid, z)
            rec["probit"] = {
                "intercept": f.b0,
                "slope": f.b1,
                "value_at_50": at50,
                "bias": {"estimate": bias, "low": bias - z * se50, "high": bias + z * se50},
                "repeatability": {
                    "estimate": rep,
                    "low": max(rep - z * rep_se, 0.0),
                    "high": rep + z * rep_se,
                },
                "deviance": f.deviance,
                "df": f.df,
                "curve": [
                    {"value": float(g), "accept": float(p), "lower": float(b), "upper": float(c)}
                    for g, p, b, c in zip(grid, f.predict(grid), lo, hi, strict=True)
                ],
                "refused": None,
            }
        except ValueError as exc:
            rec["probit"] = {"refused": str(exc)}
        out[side] = rec
    return out


def measured_results(study: Study, ratings: Ratings) -> dict[str, Any] | None:
    """The ``measured`` block of the results (None when the study has no measured reference)."""
    spec = load_measured(study, ratings)
    if spec is None:
        return None
    from .stats.pod import detection
    from .stats.zone import disagreement_zone

    level = study.confidence
    codes = ratings.codes
    reject_idx = [ratings.categories.index(c) for c in spec.reject_set]
    present = codes >= 0
    rejected = np.isin(codes, reject_idx) & present
    accepted = present & ~rejected
    v = np.array([spec.values[i] for i in ratings.items])
    items = []
    for i, item in enumerate(ratings.items):
        items.append(
            {
                "item": item,
                "value": float(v[i]),
                "accepted": int(accepted[i].sum()),
                "rated": int(present[i].sum()),
                "by_rater": {
                    rid: [int(accepted[i, j].sum()), int(present[i, j].sum())]
                    for j, rid in enumerate(ratings.raters)
                },
            }
        )
    items.sort(key=lambda r: (r["value"], r["item"]))
    tol = (spec.upper - spec.lower) if spec.lower is not None and spec.upper is not None else None
    out: dict[str, Any] = {
        "unit": spec.unit,
        "lower_limit": spec.lower,
        "upper_limit": spec.upper,
        "tolerance": tol,
        "analyses": list(spec.analyses),
        "reject_set": list(spec.reject_set),
        "value_file": {"name": spec.path.name, "sha256": spec.sha256, "rows": spec.rows},
        "items": items,
    }
    by_rater_acc = accepted.sum(axis=2)  # items x raters
    by_rater_n = present.sum(axis=2)
    if "gauge_curve" in spec.analyses:
        out["gauge_curve"] = {
            rid: _gauge_curve(spec, v, by_rater_acc[:, j], by_rater_n[:, j], level)
            for j, rid in enumerate(ratings.raters)
        }
    if "detection" in spec.analyses:
        kw = dict(link=spec.link, log_size=spec.size_axis == "log", confidence_level=level)
        hits_r = rejected.sum(axis=2)
        det = {
            "pooled": detection(v, hits_r.sum(axis=1), by_rater_n.sum(axis=1), **kw),  # type: ignore[arg-type]
            "by_rater": {
                rid: detection(v, hits_r[:, j], by_rater_n[:, j], **kw)  # type: ignore[arg-type]
                for j, rid in enumerate(ratings.raters)
            },
        }
        out["detection"] = det
    if "zone" in spec.analyses:
        zones: dict[str, Any] = {}
        all_acc, all_n = accepted.sum(axis=(1, 2)), present.sum(axis=(1, 2))
        for side, (limit, sel) in _side_items(spec, v).items():
            idx = np.flatnonzero(sel)
            zr = disagreement_zone(v[idx], all_acc[idx], all_n[idx], side)
            zones[side] = {
                "limit": limit,
                "accept_end": zr["accept_end"],
                "reject_end": zr["reject_end"],
                "width": zr["width"],
                "share_of_tolerance": (zr["width"] / tol)
                if (zr["width"] is not None and tol)
                else None,
                "inside": [ratings.items[int(idx[k])] for k in zr["inside"]],
            }
        out["zone"] = zones
    decimals = max((_decimals(t) for t in _raw_values(spec)), default=3)
    out["decimals"] = decimals + 1
    out["readings"] = _readings(out, study, decimals + 1)
    return out


def _raw_values(spec: MeasuredSpec) -> list[str]:
    return [repr(v) for v in spec.values.values()]


def _decimals(text: str) -> int:
    return len(text.split(".", 1)[1]) if "." in text and not text.endswith(".0") else 0


#: zone width as a share of the tolerance, read like a %GRR figure: below 10 % acceptable,
#: 10-30 % may be acceptable, above 30 % not (common practice, no source)
ZONE_SHARE_GOOD, ZONE_SHARE_POOR = 0.10, 0.30


def _readings(m: dict[str, Any], study: Study, d: int) -> list[str]:
    """The figures in plain words, one sentence each, in report order."""
    u = m["unit"]

    def f(x: float) -> str:
        return f"{x:.{d}f} {u}"

    out: list[str] = []
    names = {r.id: r.name for r in study.raters}
    for rid, per in (m.get("gauge_curve") or {}).items():
        who = names.get(rid, rid)
        for side, rec in per.items():
            a, pr = rec.get("analytic") or {}, rec.get("probit") or {}
            if a.get("refused") is None and a:
                where = "below" if side == "lower" else "above"
                direction = "beyond" if a["bias"] > 0 else "short of"
                out.append(
                    f"{who}, {side} limit {f(rec['limit'])}: acceptance is 50 % at {f(a['value_at_50'])}, "
                    f"{f(abs(a['bias']))} {direction} the limit (bias {f(a['bias'])}; a positive bias "
                    f"accepts items {where} the limit); repeatability {f(a['repeatability'])}. "
                    + (
                        f"The t-test shows the bias is real (t = {a['t']:.2f} > {a['t_critical']:.2f})."
                        if a["bias_significant"]
                        else f"The t-test does not show a bias (t = {a['t']:.2f} <= {a['t_critical']:.2f})."
                    )
                )
            elif a:
                out.append(f"{who}, {side} limit: no analytic curve: {a['refused']}.")
            if pr.get("refused"):
                out.append(f"{who}, {side} limit: no probit fit: {pr['refused']}.")
    det = m.get("detection") or {}
    limit = m.get("upper_limit")
    for who, rec in [("All raters together", det.get("pooled"))] + [
        (names.get(k, k), v) for k, v in (det.get("by_rater") or {}).items()
    ]:
        if not rec:
            continue
        if rec.get("a90") is None:
            out.append(f"{who}: no probability of detection can be given: {rec['refused']}.")
            continue
        text = (
            f"{who}: half of the items of {rec['a50']:.{d}f} {u} are found (a50); 90 % of those of "
            f"{rec['a90']:.{d}f} {u} (a90)"
        )
        if rec.get("a90_95") is None:
            out.append(text + f"; no a90/95: {rec['refused']}.")
            continue
        text += (
            f"; with {100 * rec['confidence_level']:g} % confidence, items of "
            f"{rec['a90_95']:.{d}f} {u} and more are found 9 times in 10 (a90/95)."
        )
        if limit is not None:
            text += (
                " That is within the limit: rejects are found reliably."
                if rec["a90_95"] <= limit
                else f" That is above the limit of {limit:g} {u}: some rejects between the limit and "
                "a90/95 are not found reliably."
            )
        out.append(text)
    for side, z in (m.get("zone") or {}).items():
        if z.get("width") is None:
            out.append(
                f"The disagreement zone at the {side} limit is open: no item bounds it on one side."
            )
            continue
        text = (
            f"At the {side} limit the raters disagree between {f(min(z['accept_end'], z['reject_end']))} and "
            f"{f(max(z['accept_end'], z['reject_end']))} ({len(z['inside'])} items inside)"
        )
        share = z.get("share_of_tolerance")
        if share is not None:
            word = (
                "acceptable"
                if share < ZONE_SHARE_GOOD
                else "may be acceptable"
                if share <= ZONE_SHARE_POOR
                else "too wide"
            )
            text += (
                f": {100 * share:.0f} % of the tolerance, {word} by common practice (no source)."
            )
        else:
            text += "; with one limit there is no tolerance to compare it with."
        out.append(text)
    if study.safety_related:
        out.append(
            "The characteristic is safety-related: these figures support, and do not replace, the "
            "customer's requirements, the applicable codes and the judgement of qualified people."
        )
    return out
