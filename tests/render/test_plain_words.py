"""Text for people: no results keys or code identifiers in any demo report, one number format
per kind, only the rules that apply, the ratings in item order, sign-off after what it signs."""

from __future__ import annotations

import html as html_lib
import re
from typing import Any

import pytest

from reportgen.render.context import _measure_label
from reportgen.render.plainwords import formula_html, plain_text

from .conftest import pdftotext_pages

DEMOS = ["built_binary", "built_ordinal", "built_nominal"]

#: what code looks like in running text: results paths, snake_case names, subscripts in
#: brackets, Python literals
CODE = re.compile(
    r"\b(?:repeatability|accuracy|reproducibility|panel_accuracy|caveats|ordinal|design|"
    r"criteria|bootstrap|results)\.[A-Za-z_*]"
    r"|\b[a-z]+_[a-z0-9_]+\b"
    r"|\[['\"][a-z_]+['\"]\]"
    r"|\bNone\b|\bTrue\b|\bFalse\b(?! alarm)|\bnan\b"
)
#: file names the report names on purpose (the attachments and their record)
ALLOWED = {"results.json"}


def _visible_html_text(doc: str) -> str:
    doc = re.sub(r"(?is)<(script|style|head)\b.*?</\1>", " ", doc)
    doc = re.sub(r"(?s)<[^>]+>", " ", doc)
    return html_lib.unescape(doc)


def _code_in(text: str) -> list[str]:
    found = []
    for m in CODE.finditer(text):
        word = text[m.start() : m.end() + 5]
        if any(word.startswith(a) or a.startswith(m.group(0)) for a in ALLOWED):
            continue
        found.append(text[max(0, m.start() - 30) : m.end() + 30].replace("\n", " "))
    return found


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_no_results_key_or_code_in_the_text_of_a_demo_report(
    which: str, request: pytest.FixtureRequest
) -> None:
    built = request.getfixturevalue(which)
    pdf_text = "\n".join(pdftotext_pages(built.pdf_path))
    html_text = _visible_html_text(built.html)
    assert len(pdf_text) > 10_000 and len(html_text) > 10_000
    assert _code_in(pdf_text) == []
    assert _code_in(html_text) == []


def test_the_code_scan_finds_what_the_reports_used_to_print() -> None:
    # each of these stood in a demo report before: page 1, the next steps, the conventions
    for text in (
        "settle: accuracy.INS-A.miss_rate about 82",
        "settle: reproducibility.fleiss_kappa about 104",
        "results['bootstrap']['measures'] lists the bootstrapped measures",
        "krippendorff_alpha_interval is given only when",
    ):
        assert _code_in(text), text


def test_plain_text_names_measures_and_gives_rates_as_percentages() -> None:
    raters = {"INS-A": {"display": "Lena Brauer (INS-A)"}}
    assert (
        plain_text("settle: accuracy.INS-A.miss_rate about 82.", _measure_label, raters)
        == "settle: Miss rate (accuracy) of Lena Brauer (INS-A) about 82."
    )
    assert (
        plain_text("settle: reproducibility.fleiss_kappa about 104", _measure_label, raters)
        == "settle: Fleiss' kappa (rater-to-rater) about 104"
    )
    # rates: one decimal percentage, the report's format (render/filters.fmt_pct)
    from reportgen.render.filters import THIN as thin

    assert plain_text("(miss rate 0.0175, false alarm rate 0; 12 %", _measure_label) == (
        f"(miss rate 1.8{thin}%, false alarm rate 0.0{thin}%; 12 %"
    )
    assert plain_text("is miss rate of INS-C, estimate 0.316 against 0.02.", _measure_label) == (
        f"is miss rate of INS-C, estimate 31.6{thin}% against 2.0{thin}%."
    )
    # coefficients and counts are left as they are
    assert plain_text("kappa estimate 0.316 against 0.75", _measure_label) == (
        "kappa estimate 0.316 against 0.75"
    )
    assert plain_text("effectiveness 1 of 3", _measure_label) == "effectiveness 1 of 3"


def test_formula_indices_are_subscripts_and_text_is_escaped() -> None:
    assert str(formula_html("kappa = (p_o - p_e) / (1 - p_e) <b>")) == (
        "kappa = (p<sub>o</sub> - p<sub>e</sub>) / (1 - p<sub>e</sub>) &lt;b&gt;"
    )


@pytest.mark.render
@pytest.mark.slow
def test_only_the_counting_rules_that_apply_are_stated(
    built_binary: Any, built_nominal: Any, built_ordinal: Any
) -> None:
    def rules(b: Any) -> str:
        return b.html.split('class="conventions"', 1)[1].split("</dl>", 1)[0]

    # the triage study has no reference: no rule about misses or effectiveness
    assert "<dt>Miss rate</dt>" not in rules(built_nominal)
    assert "<dt>Effectiveness</dt>" not in rules(built_nominal)
    assert "<dt>Agreement among raters</dt>" in rules(built_nominal)
    # the seal check declares a defect category: the miss rate applies; no ordered-scale rules
    assert "<dt>Miss rate</dt>" in rules(built_binary)
    assert "<dt>Weights</dt>" not in rules(built_binary)
    assert "<dt>Weights</dt>" in rules(built_ordinal)


@pytest.mark.render
@pytest.mark.slow
def test_ratings_appendix_in_item_order_with_missing_marked(built_nominal: Any) -> None:
    table = built_nominal.html.split('<table class="ratings">', 1)[1].split("</table>", 1)[0]
    items = re.findall(r"<tr><td><bdi>([^<]+)</bdi></td>", table)
    assert len(items) == built_nominal.results["design"]["items"]

    def key(s: str) -> list[Any]:
        return [int(p) if p.isdigit() else p for p in re.split(r"(\d+)", s) if p]

    assert items == sorted(items, key=key)
    missing = built_nominal.results["design"]["missing"]
    assert missing > 0 and table.count('<td class="miss"><bdi>–</bdi></td>') == missing


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_sign_off_follows_what_it_signs_and_method_follows_the_core(
    which: str, request: pytest.FixtureRequest
) -> None:
    doc = request.getfixturevalue(which).html
    signoff = doc.split('<section class="sec signoff">', 1)[1].split("</section>", 1)[0]
    if "Acceptance criteria and their outcomes" in signoff:
        assert signoff.index("Acceptance criteria and their outcomes") < signoff.index(
            "Prepared by"
        )
    assert doc.index('id="signoff"') < doc.index('id="method"') < doc.index('id="appendix"')
    # certificates without rules carry no signature lines
    for block in doc.split('<div class="certificate">')[1:]:
        block = block.split('<div class="certificate">', 1)[0]
        if "not judged" in block.split("</p>", 2)[1]:
            assert "Inspector signature" not in block.split("</section>", 1)[0]


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_detail_a_reader_looks_up_sits_in_the_appendix(
    which: str, request: pytest.FixtureRequest
) -> None:
    built = request.getfixturevalue(which)
    doc = built.html
    appendix = doc.index('id="appendix"')
    for marker in (
        "Agreement among the raters in trial",
        'id="fig-item-map"',
        'id="fig-confusion"',
        "<caption>Fleiss' kappa per category</caption>",
    ):
        if marker in doc:
            assert doc.index(marker) > appendix, marker
    assert 'id="fig-item-map"' in doc  # every demo draws its item map, in the appendix
    # the core lists at most 10 hard items; the appendix lists them all
    core = doc[: doc.index('id="signoff"')]
    hard = built.results.get("hard_items") or []
    if len(hard) > 10:
        table = core.split('<table class="hard">', 1)[1].split("</table>", 1)[0]
        assert table.count("<tr>") == 1 + 10
        assert f"all {len(hard)}" in doc[appendix:]
    # a binary scale has two identical rows per category: none is shown
    if built.study.scale == "binary":
        assert "Fleiss' kappa per category" not in doc
    # the core ends before "Reading the coefficients", which opens the part a reader looks up
    pages = pdftotext_pages(built.pdf_path)
    first = next(
        i for i, p in enumerate(pages) if "Reading the coefficients\n" in p.split("\n", 3)[-1]
    )
    assert first <= 11, first  # core pages (SEAL 11, FINISH 10, TRIAGE 5; 15/15/9 before)
