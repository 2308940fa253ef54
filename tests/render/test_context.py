"""The template context contract: every field documented, templates use nothing else,
sections in the vocabulary's order, absent measures absent (not zero), filters exact."""

from __future__ import annotations

import dataclasses

import pytest

from reportgen.render import filters as f
from reportgen.render.context import SECTIONS, ReportContext, build_context, context_help
from reportgen.render.environment import builtin_template_dir, make_environment

from .conftest import SECTION_TITLES, STUDIES, WHEN


def test_every_field_has_help() -> None:
    helps = context_help()
    assert set(helps) == {fl.name for fl in dataclasses.fields(ReportContext)}
    for name, text in helps.items():
        assert len(text) > 20, f"field {name} has no real help text"


def test_templates_use_only_context_names() -> None:
    import jinja2.meta

    env = make_environment()
    allowed = set(context_help()) | {
        "mx",
        "s",
        "loop",
    }  # import alias and the include loop variable
    folder = builtin_template_dir()
    names = sorted(
        p.name
        for p in folder.glob("*.html")
        if p.name in {"base.html", "report.html", "_macros.html"} or p.name.startswith("_section_")
    )
    names += ["report.css", "print.css"]
    assert "_section_summary.html" in names
    for name in names:
        source = (folder / name).read_text(encoding="utf-8")
        undeclared = jinja2.meta.find_undeclared_variables(env.parse(source))
        assert undeclared <= allowed, (
            f"{name} uses {sorted(undeclared - allowed)} outside the context contract"
        )


def test_one_partial_per_section() -> None:
    folder = builtin_template_dir()
    for anchor, _title in SECTIONS:
        assert (folder / f"_section_{anchor}.html").is_file(), anchor


def test_sections_follow_vocabulary() -> None:
    assert [t for _a, t in SECTIONS] == SECTION_TITLES
    from _vocabulary import shared_text

    vocab = shared_text()
    if vocab is None:
        pytest.skip("shared/VOCABULARY.md not beside the repository")
    block = vocab.split("## Report sections, in order", 1)[1].split("##", 1)[0]
    listed = [
        line.split(". ", 1)[1].split(" (", 1)[0].strip()
        for line in block.splitlines()
        if line[:1].isdigit()
    ]
    # the same words; the order follows the direction above the list (the list keeps the first
    # version's order): the method statement moves behind the core, before the appendix
    assert sorted(listed) == sorted(SECTION_TITLES)
    assert SECTION_TITLES[-2:] == ["Method statement", "Appendix"]
    assert SECTION_TITLES.index("Sign-off") < SECTION_TITLES.index("Method statement")
    assert "the core" in block and "appendix (method statement" in block


def _context(name: str):
    from reportgen.ratings import load_ratings
    from reportgen.render.build import compute_results
    from reportgen.study import load_study

    study = load_study(STUDIES / name / "study.yaml")
    ratings = load_ratings(study)
    results = compute_results(study, ratings)
    return study, results, build_context(study, ratings, results, generated_at=WHEN)


def test_binary_context_contents() -> None:
    study, results, ctx = _context("seal-check")
    titles = [s["title"] for s in ctx.sections]
    assert "Ordered-scale agreement" not in titles
    assert titles == [t for t in SECTION_TITLES if t != "Ordered-scale agreement"]
    assert ctx.ordinal is None
    assert ctx.safety_caution and "does not replace" in ctx.safety_caution
    assert ctx.verdict is not None and ctx.verdict["outcome"] == results["verdict"]["outcome"]
    assert 3 <= len(ctx.deciding) <= 4
    # per-rater rows carry the very records of results.json (no rounding before the filters)
    rid = study.raters[0].id
    acc = next(a for a in ctx.accuracy if a["rater"]["id"] == rid)
    keys = [m["key"] for m in acc["measures"]]
    assert keys[:2] == ["agreement", "effectiveness"] and "miss_rate" in keys
    assert "weighted_kappa" not in keys and "kendall_tau_b" not in keys  # binary: absent, not zero
    rec = next(m["m"] for m in acc["measures"] if m["key"] == "miss_rate")
    assert rec == results["accuracy"][rid]["miss_rate"]
    # one certificate block per inspector, with the verdict module's outcome
    assert [b["rater"]["id"] for b in ctx.certification] == list(study.rater_ids)
    insp = {i["rater"]: i for i in results["certification"]["inspectors"]}
    assert [b["outcome"] for b in ctx.certification] == [
        insp[r]["outcome"] for r in study.rater_ids
    ]
    assert (
        ctx.running_head
        == f"{study.id} · revision {study.revision} · {results['verdict']['outcome']}"
    )
    # the sources carry the loader's hashes
    ratings_src = next(s for s in ctx.sources if s["role"] == "ratings")
    import hashlib

    assert (
        ratings_src["sha256"]
        == hashlib.sha256((STUDIES / "seal-check" / "ratings.csv").read_bytes()).hexdigest()
    )


def test_nominal_without_reference_leaves_accuracy_out() -> None:
    study, results, ctx = _context("defect-triage")
    assert "accuracy" not in results and "panel_accuracy" not in results
    assert ctx.accuracy == [] and ctx.panel == [] and ctx.confusion == []
    assert ctx.repeatability == []  # one trial
    assert ctx.ordinal is None
    assert {m["key"] for m in ctx.reproducibility} >= {
        "agreement",
        "fleiss_kappa",
        "krippendorff_alpha",
    }
    assert "gwet_ac2" not in {m["key"] for m in ctx.reproducibility}  # nominal: absent
    method = {m["key"] for m in ctx.method}
    assert "miss_rate" not in method and "weighted_kappa" not in method and "fleiss_kappa" in method


def test_ordinal_context_has_steps() -> None:
    study, results, ctx = _context("finish-grading")
    assert ctx.ordinal is not None
    k = len(study.categories)
    assert ctx.ordinal["steps"] == list(range(-(k - 1), k))
    rid = study.raters[0].id
    row = next(r for r in ctx.ordinal["rows"] if r["rater"]["id"] == rid)
    offsets = results["ordinal"]["accuracy"][rid]["offsets"]
    assert row["offsets"] == [offsets[str(s)] for s in ctx.ordinal["steps"]]
    # confusion is shown reference × rating: the transpose of the stored rater × reference table
    conf = results["accuracy"][rid]["confusion"]
    assert conf["rows"] == "rater"
    shown = next(c for c in ctx.confusion if c["rater"]["id"] == rid)["rows"]
    assert shown == [list(r) for r in zip(*conf["counts"], strict=True)]


# ---- filters: the only place where numbers are rounded ------------------------------------


@pytest.mark.parametrize(
    ("fn", "arg", "expected"),
    [
        (f.fmt_num, None, "—"),
        (f.fmt_num, 0.81249, "0.812"),
        (f.fmt_num, -0.0004, "0.000"),
        (f.fmt_num, -0.25, "−0.250"),
        (f.fmt_estimate, {"estimate": 0.7}, "0.700"),
        (f.fmt_estimate, {"estimate": None}, "—"),
        (f.fmt_pct, 0.8125, "81.3 %"),
        (f.fmt_pct, None, "—"),
        (f.fmt_p, 0.0004, "< 0.001"),
        (f.fmt_p, 0.0312, "0.031"),
        (f.fmt_p, None, "—"),
        (f.fmt_int, 12345, "12 345"),
        (f.fmt_level, 0.95, "95 %"),
        (f.fmt_level, 0.975, "97.5 %"),
        (f.fmt_signed, 0.125, "+0.13"),  # half away from zero
        (f.fmt_signed, -0.3, "−0.30"),
        (f.fmt_date, "2026-11-20", "2026-11-20"),
    ],
)
def test_filters(fn, arg, expected) -> None:  # type: ignore[no-untyped-def]
    assert fn(arg) == expected


def test_fmt_ci() -> None:
    m = {"estimate": 0.5, "ci_low": 0.41234, "ci_high": 0.6}
    assert f.fmt_ci(m) == "0.412 to 0.600"
    assert f.fmt_ci(m, 1, pct=True) == "41.2 % to 60.0 %"
    assert f.fmt_ci({"estimate": 0.5, "ci_low": None, "ci_high": None}) == "—"


def test_cli_start_up_imports_no_render_stack() -> None:
    """`reportgen --help` and `build --help` must not import the render stack (start-up speed)."""
    import subprocess
    import sys

    for args in (["--help"], ["build", "--help"]):
        r = subprocess.run(
            [sys.executable, "-X", "importtime", "-m", "reportgen", *args],
            capture_output=True,
            text=True,
        )
        assert r.returncode == 0, r.stderr[-500:]
        imported = {
            line.split("|")[-1].strip().split(".")[0]
            for line in r.stderr.splitlines()
            if "|" in line
        }
        assert not imported & {"weasyprint", "matplotlib", "jinja2", "fontTools", "pandas"}, args
    r = subprocess.run(
        [sys.executable, "-m", "reportgen", "build", "--help"], capture_output=True, text=True
    )
    for option in ("--output", "--replace", "--generated-at", "--strict", "--no-pdf", "--quiet"):
        assert option in r.stdout, option


def test_bad_generated_at_is_input_error(tmp_path, run_cli) -> None:  # type: ignore[no-untyped-def]
    from .conftest import small_study

    code, _o, err = run_cli(
        "build", small_study(tmp_path / "s"), "-o", tmp_path / "out", "--generated-at", "yesterday"
    )
    assert code == 2 and "--generated-at" in err and "ISO 8601" in err
    assert not (tmp_path / "out").exists()
