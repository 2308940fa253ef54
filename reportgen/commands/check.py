"""``reportgen check STUDY.yaml``: read and check a study, print its design and warnings.

Nothing is written.  Bad input exits 2 (``--json``: the problems as JSON on stdout); with
``--strict`` any warning exits 4.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import click

from . import json_option, quiet_option, study_argument


def _validate_criteria(study: Any, ratings: Any) -> list[Any]:
    """Problems in the acceptance criteria, when the verdict layer is present.

    When ``verdict.validate_criteria`` takes ``has_reference`` it judges the criteria from the
    study design alone (its documented mode for ``check``), so no statistics are computed;
    otherwise the results of ``analysis.analyse`` are passed.
    """
    import importlib
    import importlib.util
    import inspect

    if study.criteria is None and study.certification is None:
        return []
    if importlib.util.find_spec("reportgen.verdict") is None:
        return []
    validate = getattr(importlib.import_module("reportgen.verdict"), "validate_criteria", None)
    if validate is None:
        return []
    if "has_reference" in inspect.signature(validate).parameters:
        problems = list(validate(study, None, has_reference=ratings.has_reference))
        load = getattr(importlib.import_module("reportgen.verdict"), "load_criteria", None)
        if load is not None and not any(
            getattr(p, "severity", "error") == "error" for p in problems
        ):
            from ..certify import demonstrability_problems

            criteria, cert = load(study, None, has_reference=ratings.has_reference)
            problems += demonstrability_problems(study, ratings, criteria, cert)
        return problems
    if importlib.util.find_spec("reportgen.analysis") is None:
        return []
    analyse = getattr(importlib.import_module("reportgen.analysis"), "analyse", None)
    if analyse is None:
        return []
    return list(validate(study, analyse(study, ratings)))


def run_check(path: str | Path) -> dict[str, Any]:
    """Load a study and its ratings; return ``{"ok", "design", "warnings"}`` or raise InputError."""
    from ..design import design_summary, design_warnings
    from ..errors import InputError
    from ..ratings import load_ratings
    from ..study import load_study

    study = load_study(path)
    ratings = load_ratings(study)
    problems = _validate_criteria(study, ratings)
    errors = [p for p in problems if getattr(p, "severity", "error") == "error"]
    if errors:
        raise InputError(errors)
    warnings = design_warnings(study, ratings)
    for p in problems:
        if p not in errors:
            warnings.append({"kind": "criteria", "message": p.format()})
    return {
        "ok": True,
        "design": design_summary(study, ratings),
        "warnings": warnings,
        "rules": rules_summary(study),
    }


def _rule_count(block: Any) -> int:
    rules = block.get("rules") if isinstance(block, dict) else None
    return len(rules) if isinstance(rules, list) else 0


def rules_summary(study: Any) -> str:
    """One line: the acceptance criteria and the certification rules that were validated."""
    crit, cert = study.criteria, study.certification
    if isinstance(crit, dict):
        n = _rule_count(crit)
        source = crit.get("source")
        part = f"criteria: {n} rule{'' if n == 1 else 's'}" + (f" from {source}" if source else "")
    else:
        part = "criteria: none (the report gives no verdict)"
    if isinstance(cert, dict):
        n = _rule_count(cert)
        months = cert.get("valid_months")
        part += f"; certification: {n} rule{'' if n == 1 else 's'}" + (
            f", valid {months} months" if months else ""
        )
    else:
        part += "; certification: none"
    return part


def _pct(n: int, d: int) -> str:
    return f"{100.0 * n / d:.1f} %" if d else "–"


def format_design(result: dict[str, Any]) -> str:
    """The human-readable design printed by ``check``."""
    d = result["design"]
    lines: list[str] = []
    s = d["study"]
    lines.append(f"study {s['id']} (revision {s['revision']}): {s['title']}")
    lines.append(f"  definition  {s['definition']}")
    for src in d["sources"]:
        detail = ", ".join(
            x
            for x in (
                src["layout"],
                src["encoding"],
                {",": "comma", ";": "semicolon", "\t": "tab"}.get(src["delimiter"] or "", ""),
                f"{src['rows']} rows",
            )
            if x
        )
        lines.append(f"  {src['role']:<11} {src['path']} ({detail})")
    lines.append("")
    lines.append("design")
    cats = ", ".join(
        f"{c['code']} {c['label']}" if c["label"] != c["code"] else c["code"]
        for c in d["categories"]
    )
    lines.append(f"  scale       {d['scale']}, {len(d['categories'])} categories: {cats}")
    if d["defect_category"]:
        lines.append(f"  defect      {d['defect_category']}")
    lines.append(f"  items       {d['items']}")
    lines.append(f"  raters      {len(d['raters'])}: {', '.join(d['raters'])}")
    lines.append(f"  trials      {d['trials']}")
    r = d["ratings"]
    lines.append(
        f"  ratings     {r['present']} of {r['expected']} expected ({_pct(r['present'], r['expected'])}; missing: {d['missing']})"
    )
    lines.append("")
    lines.append("completeness by rater")
    for rid, c in d["completeness"]["by_rater"].items():
        lines.append(
            f"  {rid:<10}  {c['present']:>7} of {c['expected']:<7} {_pct(c['present'], c['expected']):>8}"
        )
    lines.append("completeness by trial")
    for t, c in d["completeness"]["by_trial"].items():
        lines.append(
            f"  trial {t:<4}  {c['present']:>7} of {c['expected']:<7} {_pct(c['present'], c['expected']):>8}"
        )
    lines.append("")
    ref = d["reference"]
    if ref is None:
        lines.append("reference   none (accuracy against the reference cannot be measured)")
    else:
        lines.append(f"reference   {ref['items_with_reference']} of {ref['items']} items")
        lines.append("  per category: " + ", ".join(f"{k} {v}" for k, v in ref["counts"].items()))
    lines.append(
        "ratings per category: " + ", ".join(f"{k} {v}" for k, v in d["rating_counts"].items())
    )
    if d["notes"]:
        lines.append("")
        lines.append("notes")
        lines.extend(f"  - {n}" for n in d["notes"])
    lines.append("")
    if result.get("rules"):
        lines.append(result["rules"])
    if result["warnings"]:
        lines.append("warnings")
        lines.extend(f"  - {w['message']}" for w in result["warnings"])
    else:
        lines.append("warnings    none")
    return "\n".join(lines)


@click.command("check")
@study_argument()
@json_option("the design (or the problems)")
@click.option("--strict", is_flag=True, help="Exit with code 4 when there are warnings.")
@quiet_option()
@click.pass_context
def command(ctx: click.Context, study: Path, as_json: bool, strict: bool, quiet: bool) -> None:
    """Read a study definition and its ratings, report every problem, print the design.

    Writes nothing.  Exit codes: 0 ok, 2 bad input, 4 warnings with --strict.
    """
    result = run_check(study)
    if as_json:
        click.echo(json.dumps(result, indent=2, ensure_ascii=False))
    elif quiet:
        for w in result["warnings"]:
            click.echo(f"warning: {w['message']}", err=True)
    else:
        click.echo(format_design(result))
    if strict and result["warnings"]:
        from ..errors import ExitCode

        if not as_json:
            click.echo(f"{len(result['warnings'])} warning(s) and --strict: failing", err=True)
        ctx.exit(int(ExitCode.STRICT))
