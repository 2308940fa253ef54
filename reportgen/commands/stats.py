"""``reportgen stats STUDY.yaml``: compute every figure of a study and print it.

Prints a readable summary on the terminal, or the full results as JSON with ``--json``
(schema ``reportgen-results/1``, documented in the README).  Only click is imported at module
level; the loaders and the statistics are imported inside the command.
"""

from __future__ import annotations

from typing import Any

import click

from . import json_option, progress_printer, quiet_option, study_argument

DEFAULT_WIDTH = 100

_NAMES = {
    "agreement": "Agreement rate",
    "effectiveness": "Effectiveness",
    "fleiss_kappa": "Fleiss' kappa",
    "krippendorff_alpha": "Krippendorff's alpha",
    "krippendorff_alpha_interval": "Krippendorff's alpha (interval)",
    "gwet_ac1": "Gwet's AC1",
    "gwet_ac2": "Gwet's AC2",
    "conger_kappa": "Conger's kappa",
    "light_kappa": "Light's kappa",
    "brennan_prediger": "Brennan-Prediger",
    "kendall_w": "Kendall's W",
    "cohen_kappa": "Cohen's kappa",
    "weighted_kappa": "Weighted kappa",
    "miss_rate": "Miss rate",
    "false_alarm_rate": "False alarm rate",
    "kendall_tau_b": "Kendall's tau-b",
}


def _num(x: Any, digits: int = 3) -> str:
    if x is None:
        return "–"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return str(x)
    return f"{x:.{digits}f}"


def _interval(m: dict[str, Any] | None) -> str:
    if not m or m.get("ci_low") is None or m.get("ci_high") is None:
        return "–"
    return f"{_num(m['ci_low'])} to {_num(m['ci_high'])}"


def _p(m: dict[str, Any] | None) -> str:
    if not m or m.get("p_value") is None:
        return "–"
    p = m["p_value"]
    return "< 0.001" if p < 0.001 else f"{p:.3f}"


def _counted(m: dict[str, Any] | None) -> str:
    if not m or m.get("items") is None:
        return "–"
    return f"{m.get('agreeing')}/{m.get('items')}"


_TABLE = "\x00"  # marks a table line: already fitted to the width, never re-wrapped


def _table(rows: list[list[str]], width: int = DEFAULT_WIDTH) -> list[str]:
    """Rows as aligned columns; a table wider than ``width`` is split into several tables of
    the columns that fit, each repeating the first column (the rater or measure)."""
    widths = [max(len(r[c]) for r in rows) for c in range(len(rows[0]))]
    groups: list[list[int]] = [[]]
    used = 2 + widths[0]
    for c in range(1, len(widths)):
        if groups[-1] and used + 2 + widths[c] > width:
            groups.append([])
            used = 2 + widths[0]
        groups[-1].append(c)
        used += 2 + widths[c]
    out = []
    for n, group in enumerate(groups):
        if n:
            out.append(_TABLE)
        for r in rows:
            cells = [r[0].ljust(widths[0])] + [r[c].rjust(widths[c]) for c in group]
            out.append(_TABLE + "  " + "  ".join(cells).rstrip())
    return out


def _fit(lines: list[str], width: int) -> str:
    """Wrap every line but table lines to ``width``, continuing under the line's indent."""
    import textwrap

    out: list[str] = []
    for line in lines:
        if line.startswith(_TABLE):
            out.append(line[1:])
        elif len(line) <= width:
            out.append(line)
        else:
            indent = " " * (len(line) - len(line.lstrip(" ")))
            out += textwrap.wrap(
                line,
                width=width,
                subsequent_indent=indent + "    ",
                break_on_hyphens=False,
            )
    return "\n".join(out)


def terminal_width() -> int:
    """The terminal's width (``COLUMNS`` wins); 100 when the output is not a terminal."""
    import shutil

    return max(40, shutil.get_terminal_size((DEFAULT_WIDTH, 24)).columns)


def _count(n: int, word: str) -> str:
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def format_summary(results: dict[str, Any], width: int = DEFAULT_WIDTH) -> str:
    """The terminal summary of a results dict (numbers rounded here, for reading only).

    Every line fits in ``width`` columns: tables are split into column groups, text is wrapped.
    """
    lines: list[str] = []
    st, de = results["study"], results["design"]
    level = de.get("confidence_level", 0.95)
    pct = f"{level * 100:g} % interval"
    lines.append(
        f"Study {st['id']} (revision {st['revision']}): {st.get('title') or ''}".rstrip(": ")
    )
    cats = ", ".join(c["code"] for c in de["categories"])
    lines.append(
        f"Design: {_count(de['items'], 'item')}, {_count(de['raters'], 'rater')}, "
        f"{_count(de['trials'], 'trial')}; "
        f"{de['scale']} scale with {len(de['categories'])} categories ({cats}); "
        f"{de['ratings']} ratings, {de['missing']} missing"
    )
    boot = results.get("bootstrap") or {}
    if boot.get("measures"):
        how = (
            f"{boot.get('ci_method')} ({boot['resamples']} resamples of items, seed {boot['seed']})"
        )
    else:
        how = "analytic"
    lines.append(
        f"Intervals: {pct}; proportions {de.get('proportion_interval')}; coefficients {how}"
    )

    rep = results.get("repeatability")
    if rep:
        lines += ["", "Rater repeatability (each rater against their own other trials)"]
        rows = [
            [
                "rater",
                "Agreeing/Items",
                "Agreement rate",
                pct,
                "Changed calls",
                "Fleiss' kappa",
                pct,
            ]
        ]
        for rid, e in rep.items():
            rows.append(
                [
                    rid,
                    _counted(e["agreement"]),
                    _num(e["agreement"]["estimate"]),
                    _interval(e["agreement"]),
                    str(e.get("mixed_calls", "–")),
                    _num(e["fleiss_kappa"]["estimate"]),
                    _interval(e["fleiss_kappa"]),
                ]
            )
        lines += _table(rows, width)

    acc = results.get("accuracy")
    if acc:
        lines += ["", "Rater accuracy (each rater against the reference)"]
        keys = [
            k
            for k in (
                "agreement",
                "effectiveness",
                "cohen_kappa",
                "weighted_kappa",
                "miss_rate",
                "false_alarm_rate",
                "kendall_tau_b",
            )
            if any(k in e for e in acc.values())
        ]
        rows = [["rater"] + [_NAMES[k] for k in keys]]
        for rid, e in acc.items():
            rows.append([rid] + [_num(e[k]["estimate"]) if k in e else "–" for k in keys])
        lines += _table(rows, width)
        rows = [["rater"] + [f"{_NAMES[k]}, {pct}" for k in keys]]
        for rid, e in acc.items():
            rows.append([rid] + [_interval(e.get(k)) for k in keys])
        lines += _table(rows, width)
        if any("misses" in e.get("counts", {}) for e in acc.values()):
            rows = [
                ["rater", "Misses", "of defect ratings", "False alarms", "of conforming ratings"]
            ]
            for rid, e in acc.items():
                c = e["counts"]
                rows.append(
                    [
                        rid,
                        str(c["misses"]),
                        str(c["defect_reference_ratings"]),
                        str(c["false_alarms"]),
                        str(c["conforming_reference_ratings"]),
                    ]
                )
            lines += _table(rows, width)

    rp = results.get("reproducibility")
    if rp:
        lines += ["", "Rater-to-rater reproducibility (agreement among the raters)"]
        rows = [["measure", "Estimate", pct, "p", "Agreeing/Items"]]
        for key, m in rp.items():
            if key in _NAMES and isinstance(m, dict):
                rows.append(
                    [
                        _NAMES[key],
                        _num(m["estimate"]),
                        _interval(m),
                        _p(m),
                        _counted(m) if key == "agreement" else "–",
                    ]
                )
        lines += _table(rows, width)
        by_cat = rp.get("fleiss_kappa_by_category")
        if by_cat:
            lines.append(
                "  Fleiss' kappa by category: "
                + ", ".join(f"{c} {_num(m['estimate'])}" for c, m in by_cat.items())
            )
        if rp.get("by_trial"):
            parts = [
                f"trial {t}: {_num(e['fleiss_kappa']['estimate'])}"
                for t, e in rp["by_trial"].items()
            ]
            lines.append("  Fleiss' kappa by trial: " + ", ".join(parts))

    pa = results.get("panel_accuracy")
    if pa:
        lines += ["", "Panel accuracy (every rating of an item matches its reference)"]
        rows = [["measure", "Estimate", pct, "Agreeing/Items"]]
        for key in ("agreement", "effectiveness", "miss_rate", "false_alarm_rate"):
            if key in pa:
                rows.append(
                    [_NAMES[key], _num(pa[key]["estimate"]), _interval(pa[key]), _counted(pa[key])]
                )
        lines += _table(rows, width)

    od = results.get("ordinal")
    if od and od.get("accuracy"):
        lines += ["", "Ordered-scale agreement (positive offset: stricter than the reference)"]
        rows = [["rater", "Exact", "Within one step", "Mean offset", pct]]
        for rid, e in od["accuracy"].items():
            rows.append(
                [
                    rid,
                    _num(e["exact"]["estimate"]),
                    _num(e["within_one_step"]["estimate"]),
                    _num(e["mean_offset"]["estimate"]),
                    _interval(e["mean_offset"]),
                ]
            )
        lines += _table(rows, width)
    if od and od.get("reproducibility"):
        steps = od["reproducibility"]["steps_apart"]
        lines.append(
            "  Steps apart (pairs of ratings of the same item): "
            + ", ".join(f"{s}: {n}" for s, n in steps.items())
        )

    if results.get("hard_items"):
        lines += [
            "",
            "Hard items (least agreement first): " + ", ".join(results["hard_items"][:10]),
        ]

    cv = results.get("caveats") or {}
    lines += ["", "Reading the coefficients"]
    if "reproducibility" in cv:
        lines.append(
            f"  Observed agreement {_num(cv['reproducibility'].get('observed_agreement'))}, "
            f"chance agreement {_num(cv['reproducibility'].get('chance_agreement'))}"
        )
    prec = cv.get("precision")
    if prec:
        hw = prec.get("half_width")
        need = prec.get("items_needed")
        lines.append(
            f"  {prec['measure']}: half-width {_num(hw)} from {prec['items']} items; "
            f"about {need if need is not None else '–'} items for ±{_num(prec['target_half_width'], 2)} (approximation)"
        )
    miss = cv.get("missing")
    if miss:
        lines.append(f"  Missing ratings: {miss['missing']} of {miss['expected_ratings']}")

    lines += _verdict_lines(results)

    warnings = results.get("warnings") or []
    if warnings:
        lines += ["", f"Warnings ({len(warnings)})"]
        lines += [f"  {w['measure']}: {w['message']}" for w in warnings]
    return _fit(lines, width)


def _verdict_lines(results: dict[str, Any]) -> list[str]:
    """Verdict, criteria source, one line per check, inspectors and the first actions."""
    lines: list[str] = []
    verdict = results.get("verdict")
    if verdict is None:
        return lines
    lines += ["", "Verdict"]
    lines.append(f"  {verdict.get('sentence', '')}")
    crit = results.get("criteria") or {}
    if crit.get("source"):
        lines.append(f"  Criteria source: {crit['source']}")
    for caution in crit.get("cautions") or []:
        lines.append(f"  Caution: {caution}")
    cert = results.get("certification") or {}
    names = {
        ins.get("rater"): ins.get("name")
        for ins in cert.get("inspectors") or []
        if ins.get("rater") and ins.get("name") and ins.get("name") != ins.get("rater")
    }

    def who(rater: Any) -> str:
        if not rater:
            return ""
        return f"{rater} ({names[rater]})" if rater in names else str(rater)

    for rule in verdict.get("rules") or []:
        label = rule.get("label") or rule.get("measure") or "rule"
        whom = who(rule.get("rater"))
        if whom:
            label = f"{whom}: {label}"
        if rule.get("category"):
            label += f", category {rule['category']}"
        value = _num(rule.get("value"))
        level = _num(rule.get("level"))
        basis = rule.get("judge_basis") or rule.get("judge") or "estimate"
        lines.append(
            f"  {rule.get('outcome') or '–':<8} {label}: {value} judged against {level} ({basis})"
        )
    if cert.get("inspectors"):
        lines += ["", "Inspector certification"]
        for ins in cert["inspectors"]:
            rater = ins.get("rater") or ins.get("id") or "–"
            until = f", valid until {ins['valid_until']}" if ins.get("valid_until") else ""
            lines.append(f"  {who(rater)}: {ins.get('outcome') or 'no outcome'}{until}")
    actions = results.get("actions") or []
    if actions:
        lines += ["", "Next steps"]
        lines += [f"  {a.get('rank')}. {a.get('text')}" for a in actions[:5]]
    return lines


_ITEMS_SLOT = "__reportgen_items_slot_5b1e__"


def dumps_results(results: dict[str, Any]) -> str:
    """The results as JSON text: indented by two spaces, one line per item record.

    Same data as ``json.dumps(results, indent=2)``; the item list (100,000 records in a labelling
    campaign) is written one compact record per line with the C encoder, which is several times
    faster than Python's indenting encoder and keeps the file readable.
    """
    import json

    items = results.get("items")
    if not isinstance(items, list) or not items:
        return json.dumps(results, indent=2, allow_nan=False)
    head = json.dumps({**results, "items": _ITEMS_SLOT}, indent=2, allow_nan=False)
    slot = f'"items": "{_ITEMS_SLOT}"'
    at = head.index(slot)
    line_start = head.rindex("\n", 0, at) + 1
    pad = head[line_start:at]
    # One C-encoder pass over the list; then a line break before every record.  Each record
    # opens with its "id" key and no nested object has one, and a quote inside a JSON string is
    # always escaped, so '}, {"id": ' occurs only between two records.
    body = json.dumps(items, allow_nan=False)[1:-1]
    body = body.replace('}, {"id": ', f'}},\n{pad}  {{"id": ')
    return f'{head[:at]}"items": [\n{pad}  {body}\n{pad}]{head[at + len(slot) :]}'


@click.command("stats")
@study_argument()
@json_option("the full results (schema reportgen-results/1)")
@quiet_option()
def command(study: str, as_json: bool, quiet: bool) -> None:
    """Compute every agreement figure of a study and print a summary (or the JSON results)."""
    import gc

    # A short-lived process holding one record per item (100,000 in a labelling campaign): the
    # cyclic garbage collector would only re-walk them while the verdict and the JSON are made.
    gc.disable()
    from ..analysis import analyse
    from ..ratings import load_ratings
    from ..study import load_study
    from ..verdict import judge

    progress = progress_printer(quiet, log=not as_json)
    loaded = load_study(study)
    ratings = load_ratings(loaded)
    results = analyse(loaded, ratings, progress=progress)
    results.update(judge(loaded, results))
    if as_json:
        click.echo(dumps_results(results))
    elif quiet:
        for w in results.get("warnings") or []:
            click.echo(f"warning: {w.get('measure')}: {w.get('message')}", err=True)
    else:
        click.echo(format_summary(results, terminal_width()))
