"""What the report says about its own footing: the acceptance criteria it judged against (scope),
how order and blinding were done (design, from the plan summary), the plan key it decoded the
ratings with (attached and hashed, so that ``reportgen verify`` can recompute), and the issue 5
"Must show" for every demo PDF."""

from __future__ import annotations

import hashlib
import io
import json
import re
from pathlib import Path
from typing import Any

import pypdf
import pytest

from reportgen.render.context import build_context
from reportgen.render.filters import fmt_ci, fmt_estimate, fmt_pct
from reportgen.render.html import render_html

from .conftest import SECTION_TITLES, STUDIES, WHEN, Built, build, keyed_study, pdftotext_pages

# --------------------------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------------------------


_ANCHORS = {"Scope": "scope", "Study design": "design", "Data integrity": "integrity"}


def _text(html: str) -> str:
    """The text of an HTML fragment, each element apart, runs of white space as one space."""
    import html as html_lib

    body = re.sub(r"<(style|script)\b.*?</\1>", " ", html, flags=re.S)
    return " ".join(html_lib.unescape(re.sub(r"<[^>]+>", " ", body)).split())


def _section(html: str, title: str) -> str:
    """The text of one report section (from its heading to the end of its <section>)."""
    part = html.split(f'<h2 id="{_ANCHORS[title]}">', 1)[1].split("</section>", 1)[0]
    text = _text(part)
    assert title in text
    return text


def _html_of(study_yaml: Path, **kw: Any) -> tuple[Any, dict[str, Any], str]:
    """Study, judged results and the rendered HTML, without charts or PDF (quick)."""
    from reportgen.ratings import load_ratings
    from reportgen.render.build import compute_results, find_plan
    from reportgen.study import load_study

    study = load_study(study_yaml)
    ratings = load_ratings(study)
    results = compute_results(study, ratings)
    ctx = build_context(
        study, ratings, results, generated_at=WHEN, plan=find_plan(study, output_dir=None), **kw
    )
    return study, results, render_html(ctx).html


def _small_binary(make_study: Any, criteria: dict[str, Any], **kw: Any) -> Path:
    """A quick binary study (12 items, no bootstrap) with the given criteria."""
    return make_study(
        n_items=12,
        scale="binary",
        categories=[{"code": "G", "label": "Good"}, {"code": "B", "label": "Bad"}],
        defect_category="B",
        bootstrap={"resamples": 0, "seed": 1},
        criteria=criteria,
        **kw,
    )


# --------------------------------------------------------------------------------------------
# 1. scope: the criteria judged, their source and cautions
# --------------------------------------------------------------------------------------------


def test_scope_prints_the_text_of_a_shipped_criteria_set(make_study: Any) -> None:
    from reportgen.verdict import CRITERIA_SETS, GENERAL_CAUTION

    s = _small_binary(make_study, {"set": "binary-inspection"})
    _study, results, text = _html_of(s)
    shipped = CRITERIA_SETS["binary-inspection"]
    assert results["criteria"]["source"] == shipped.source
    scope = _section(text, "Scope")
    assert "shipped criteria set binary-inspection" in scope
    assert " ".join(shipped.source.split()) in scope  # the set's own text, not just its name
    assert " ".join(shipped.caution.split()) in scope
    assert GENERAL_CAUTION not in scope  # a shipped set carries its own caution
    assert "Marginal counts as improve" in scope


def test_scope_shows_the_zero_failure_size_of_a_miss_rate_bound(make_study: Any) -> None:
    s = _small_binary(make_study, {"set": "miss-rate-bound"})
    _study, results, text = _html_of(s)
    zf = results["criteria"]["zero_failure"]
    # the success-run relation n = ln(1 - C) / ln(R) (common practice, no source):
    # ln(0.05) / ln(0.95) = 58.4, rounded up to 59 — the 59 of issue 6's "Must show"
    assert zf["ratings_needed"] == 59
    scope = _section(text, "Scope")
    assert "Zero-failure size. " + " ".join(zf["text"].split()) in scope
    assert "With no misses at all, 59 ratings of defect items per rater" in scope


def test_scope_lists_the_rules_of_a_set_that_were_left_out(make_study: Any) -> None:
    # one trial: the kappa-bands rule on repeatability does not apply and is left out
    s = make_study(
        n_items=12, trials=1, bootstrap={"resamples": 0, "seed": 1}, criteria={"set": "kappa-bands"}
    )
    _study, results, text = _html_of(s)
    left = results["criteria"]["left_out"]
    assert [x["measure"] for x in left] == ["repeatability.*.fleiss_kappa"]
    scope = _section(text, "Scope")
    assert "were left out:" in scope
    assert "Fleiss' kappa (repeatability): " + left[0]["reason"] in scope


def test_scope_of_the_study_own_criteria_and_of_none(make_study: Any, tmp_path: Path) -> None:
    from reportgen.verdict import GENERAL_CAUTION, SAFETY_CAUTION

    own = {
        "source": "Line 4 work instruction (invented)",
        "rules": [{"measure": "reproducibility.fleiss_kappa", "pass": 0.75, "marginal": 0.4}],
    }
    s = _small_binary(make_study, own, study={"id": "OWN-1", "title": "t", "safety_related": True})
    _study, results, text = _html_of(s)
    scope = _section(text, "Scope")
    assert "Acceptance criteria Line 4 work instruction (invented)" in scope
    assert "shipped criteria set" not in scope
    assert results["criteria"]["cautions"] == [GENERAL_CAUTION, SAFETY_CAUTION]
    for caution in results["criteria"]["cautions"]:
        assert " ".join(caution.split()) in scope
    none = _small_binary(make_study, own)
    text_none = none.read_text(encoding="utf-8").split("criteria:")[0]
    none.write_text(text_none, encoding="utf-8")
    _study, results, text = _html_of(none)
    assert results["criteria"] is None
    assert "Acceptance criteria none set in the study definition" in _section(text, "Scope")


# --------------------------------------------------------------------------------------------
# 2. and 3. design section from the plan; the key attached, hashed and verified
# --------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def keyed(tmp_path_factory: pytest.TempPathFactory) -> Built:
    base = tmp_path_factory.mktemp("keyed")
    return build(keyed_study(base), base / "out")


@pytest.mark.slow
def test_design_states_how_order_and_blinding_were_done(keyed: Built) -> None:
    import json

    plan = json.loads((keyed.study.path.parent / "plan" / "plan.json").read_text())
    design = _section(keyed.html, "Study design")
    assert "Blinding " + plan["blinding"] in design
    assert "Order " + plan["order"] in design
    assert "seed 2718" in plan["order"] and "Plan seed 2718 (command line)" in design
    assert "Gap between trials " + plan["gap"] in design
    dates = "; ".join(f"trial {d['trial']}: {d['date']}" for d in plan["trial_dates"])
    assert dates.startswith("trial 1: 2026-11-02; trial 2: 2026-11-")
    assert "Planned dates " + dates in design
    squashed = design.replace(" ", "")
    assert "decodedwithitskey(key.csv,listedunderdataintegrity)." in squashed
    assert "No reportgen plan was recorded" not in design


def test_design_without_a_plan_says_so(built_nominal: Built) -> None:
    design = _section(built_nominal.html, "Study design")
    assert (
        "Blinding and order No reportgen plan was recorded for this study: order and blinding are "
        "as stated by the study owner." in design
    )
    assert "Plan seed" not in design


def test_plan_found_but_ratings_not_keyed(make_study: Any, tmp_path: Path) -> None:
    """A plan summary beside the study, ratings entered without its labels: said plainly."""
    import json

    s = make_study(n_items=12, bootstrap={"resamples": 0, "seed": 1})
    summary = {
        "schema": "reportgen-plan/1",
        "study": {"id": "TEST-01", "title": "Test study", "revision": 1},
        "seed": 99,
        "seed_source": "study definition",
        "trial_dates": [{"trial": 1, "date": "2026-11-02"}, {"trial": 2, "date": "2026-11-09"}],
        "blinding": "Coded labels (invented summary).",
        "order": "Own order per sheet (invented summary).",
        "gap": "Trials are planned 7 day(s) apart.",
        "design": {"items": 12, "run_sheets": 6},
    }
    (s.parent / "plan.json").write_text(json.dumps(summary), encoding="utf-8")
    _study, _results, text = _html_of(s)
    design = _section(text, "Study design")
    assert "Plan seed 99 (study definition)" in design
    assert "the ratings were not entered with its coded labels" in design
    # a plan.json that cannot be read is an input error, not a silent "no plan"
    (s.parent / "plan.json").write_text("{not json", encoding="utf-8")
    from reportgen.errors import InputError

    with pytest.raises(
        InputError, match=r"plan summary \(plan\.json\) of this study cannot be read"
    ):
        _html_of(s)


@pytest.mark.slow
def test_key_file_attached_hashed_and_verified(keyed: Built) -> None:
    from reportgen.verify import verify_report

    key_path = keyed.study.path.parent / "plan" / "key" / "key.csv"
    digest = hashlib.sha256(key_path.read_bytes()).hexdigest()
    atts = pypdf.PdfReader(io.BytesIO(keyed.pdf)).attachments
    assert sorted(atts) == [
        "build-record.json",
        "key.csv",
        "ratings-entry.csv",
        "reference.csv",
        "results.json",
        "study.yaml",
    ]
    assert atts["key.csv"][0] == key_path.read_bytes()
    integrity = _section(keyed.html, "Data integrity")
    assert re.search(r"key key\.csv .*? " + digest, integrity), integrity[:800]
    v = verify_report(keyed.pdf_path)
    assert v.ok, v.format()
    checks = {f.check: f for f in v.findings}
    assert checks["hashes"].message == "4 attached input(s) have the SHA-256 printed in the report"
    assert checks["recompute"].ok and "key" not in checks["recompute"].message
    assert checks["document"].ok  # rebuilt with the plan summary from the build record


@pytest.mark.slow
def test_verify_names_a_stripped_key(keyed: Built, tmp_path: Path) -> None:
    from _built import attachments_of, rewrite_attachments

    from reportgen.verify import verify_report

    atts = attachments_of(keyed.pdf_path)
    del atts["key.csv"]
    v = verify_report(rewrite_attachments(keyed.pdf_path, tmp_path / "nokey.pdf", atts))
    checks = {f.check: f for f in v.findings}
    assert not v.ok
    assert checks["recompute"].message == (
        "cannot recompute: the key file 'plan/key/key.csv' that the study definition names is not attached"
    )
    assert any(d.startswith("attachment stripped: ") for d in checks["hashes"].details)


# --------------------------------------------------------------------------------------------
# 6. issue 5 "Must show": every demo PDF
# --------------------------------------------------------------------------------------------

DEMOS = ("built_binary", "built_ordinal", "built_nominal")
#: attachments per demo study: defect-triage has no reference file, so it carries three
ATTACHMENTS = {
    "SEAL-CHECK-DEMO": [
        "build-record.json",
        "ratings.csv",
        "reference.csv",
        "results.json",
        "study.yaml",
    ],
    "FINISH-GRADE-DEMO": [
        "build-record.json",
        "ratings.csv",
        "reference.csv",
        "results.json",
        "study.yaml",
    ],
    "RETURNS-TRIAGE-DEMO": ["build-record.json", "ratings.csv", "results.json", "study.yaml"],
}
PCT = {
    "agreement",
    "effectiveness",
    "miss_rate",
    "false_alarm_rate",
    "exact_agreement",
    "within_one_agreement",
}


def _is_record(x: Any) -> bool:
    return isinstance(x, dict) and "estimate" in x and x.get("estimate") is not None


def main_figures(results: dict[str, Any]) -> list[tuple[str, str, str]]:
    """(path, estimate, interval) as the report's filters format them, for every measure of
    repeatability, accuracy, reproducibility (with Fleiss' kappa per category) and panel accuracy."""
    out: list[tuple[str, str, str]] = []

    def add(path: str, key: str, m: Any) -> None:
        if not _is_record(m):
            return
        if key in PCT:
            out.append((path, fmt_pct(m), fmt_ci(m, 1, pct=True)))
        else:
            out.append((path, fmt_estimate(m), fmt_ci(m)))

    for block in ("repeatability", "accuracy"):
        for rater, measures in (results.get(block) or {}).items():
            for key, m in measures.items():
                add(f"{block}.{rater}.{key}", key, m)
    repro = results.get("reproducibility") or {}
    for key, m in repro.items():
        add(f"reproducibility.{key}", key, m)
    for code, m in (repro.get("fleiss_kappa_by_category") or {}).items():
        add(f"reproducibility.fleiss_kappa_by_category.{code}", "fleiss_kappa", m)
    for key, m in (results.get("panel_accuracy") or {}).items():
        add(f"panel_accuracy.{key}", key, m)
    return out


def _squash(text: str) -> str:
    return re.sub(r"[\s\u00a0\u2009\u202f]+", "", text)


@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_demo_pdf_must_show(which: str, request: pytest.FixtureRequest) -> None:
    built: Built = request.getfixturevalue(which)
    study = built.study
    reader = pypdf.PdfReader(io.BytesIO(built.pdf))  # opens
    assert built.pdf.startswith(b"%PDF-") and len(reader.pages) >= 5
    # PDF/A-3b per its XMP metadata
    xmp = reader.trailer["/Root"]["/Metadata"].get_object().get_data().decode("utf-8")
    assert re.search(r"pdfaid:part(>|=\")3", xmp) and re.search(r"pdfaid:conformance(>|=\")B", xmp)
    # the attachments: the inputs as read, and results.json as written beside the PDF
    atts = {name: data[0] for name, data in reader.attachments.items()}
    assert sorted(atts) == ATTACHMENTS[study.id]
    folder = STUDIES / study.path.parent.name
    for name in atts:
        if (
            name == "build-record.json"
        ):  # how it was built: state, time, software (tests/test_integrity_*)
            assert json.loads(atts[name])["state"] == "release"
            continue
        expected = (built.folder / name) if name == "results.json" else (folder / name)
        assert atts[name] == expected.read_bytes(), name
    # every section heading (ordered-scale agreement only on the ordinal scale)
    pages = pdftotext_pages(built.pdf_path)
    flat = " ".join(" ".join(pages).split())
    for title in SECTION_TITLES:
        if title == "Ordered-scale agreement" and study.scale != "ordinal":
            assert title not in flat
        else:
            assert title in flat, title
    # the same figures as results.json, as the report's filters format them
    squashed = _squash(flat)
    figures = main_figures(built.results)
    # seal-check 34 figures, finish-grading 54, defect-triage 12 (no reference, one trial)
    assert len(figures) >= {"SEAL-CHECK-DEMO": 30, "FINISH-GRADE-DEMO": 50}.get(study.id, 10)
    missing = [
        (path, est, ci)
        for path, est, ci in figures
        if _squash(est) not in squashed or (ci != "—" and _squash(ci) not in squashed)
    ]
    assert missing == []
    verdict = built.results["verdict"]["outcome"]
    assert f"{study.id} · revision {study.revision} · {verdict}" in flat


def test_ordinal_shares_against_the_reference_print_as_percentages(built_ordinal: Built) -> None:
    """accuracy.<rater>.exact_agreement / within_one_agreement (and the panel's): shown with
    their intervals in the accuracy tables, as percentages, with a reading."""
    text = _text(built_ordinal.html)
    blocks = [*built_ordinal.results["accuracy"].values(), built_ordinal.results["panel_accuracy"]]
    for acc in blocks:
        for key, name, what in (
            ("exact_agreement", "Exact agreement", "equal the reference"),
            ("within_one_agreement", "Within one step", "are at most one step from the reference"),
        ):
            m = acc[key]
            row = f"{name} {fmt_pct(m)} {fmt_ci(m, 1, pct=True)} {m['items']} {m['agreeing']} — "
            assert row + f"{fmt_pct(m)} of the ratings {what}" in text, key
