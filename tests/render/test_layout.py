"""Pages that look finished, checked the way a reader sees them: from the PDF text layer.

Every demo report, a history and the run sheets of a plan are read with poppler's
``pdftotext -bbox-layout`` (tests/_layout.py):

- no two words are printed over each other (the hard-items headings "Matching reference" and
  "Ratings given" and the ordered-scale headings "Within one step / Mean signed offset" ran into
  each other before column headings could wrap);
- no page ends with a heading, a table caption or a glossary term;
- no word runs past the edge of the page (the history's wide tables were clipped);
- chart text is at least 7 pt at print size (the seal-check rater chart was printed at 4.8 pt);
- legend fills differ in greyscale lightness by at least 15 L*, or by a pattern, and "missing"
  has a pattern of its own.

The 7 pt floor and the 15 L* step are common practice for printed figures, no source.
"""

from __future__ import annotations

import datetime as dt
import itertools
import sys
from pathlib import Path
from typing import Any

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
import _layout as L  # noqa: E402

from reportgen.render import charts  # noqa: E402

#: page margins of the report (templates/print.css): 20 mm top, 18 mm bottom
TOP, BOTTOM = 20 * L.MM, 18 * L.MM
#: text width of an A4 page with 15 mm side margins, in points (Letter is wider)
PRINT_WIDTH_PT = 180 * L.MM

DEMOS = ["built_binary", "built_ordinal", "built_nominal"]


def _pages(built: Any) -> list[L.Page]:
    return L.read_pages(built.pdf_path)


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_demo_report_has_no_text_over_text_and_nothing_past_the_edge(
    which: str, request: pytest.FixtureRequest
) -> None:
    built = request.getfixturevalue(which)
    pages = _pages(built)
    assert len(pages) >= 5 and sum(len(p.words) for p in pages) > 2000
    assert L.overlapping_words(pages) == []
    past = [f"page {p.number}: {w.text!r}" for p in pages for w in p.words if w.x1 > p.width + 0.5]
    assert past == []


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_demo_report_never_ends_a_page_with_a_heading_caption_or_term(
    which: str, request: pytest.FixtureRequest
) -> None:
    built = request.getfixturevalue(which)
    heads = L.heading_texts(built.html)
    assert any(h.startswith("Hard items, least agreement first") for h in heads)
    assert L.stranded_headings(_pages(built), heads, top=TOP, bottom=BOTTOM) == []


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.parametrize("which", DEMOS)
def test_demo_chart_text_is_at_least_7_pt_at_print_size(
    which: str, request: pytest.FixtureRequest
) -> None:
    built = request.getfixturevalue(which)
    svgs = sorted(built.folder.glob("*.svg"))
    assert len(svgs) >= 2
    for svg in svgs:
        data = svg.read_bytes()
        sizes = L.svg_text_sizes(data, PRINT_WIDTH_PT)
        assert len(sizes) >= 5, svg.name  # the chart has text, and the reader found it
        assert L.svg_width_pt(data) <= PRINT_WIDTH_PT + 0.5, svg.name  # printed unshrunk
        assert min(sizes) >= charts.MIN_TEXT_PT, (svg.name, min(sizes))


def test_the_text_size_reader_sees_a_shrunk_chart() -> None:
    """The reader itself: a 1000 pt wide chart with 8.5 pt text prints at 8.5 × 510/1000."""
    svg = (
        b'<svg width="1000pt" height="100pt"><g style="fill: #000" '
        b'transform="translate(1 2) scale(0.085 -0.085)"></g></svg>'
    )
    assert L.svg_text_sizes(svg, 510.0) == pytest.approx([8.5 * 0.51])


@pytest.mark.parametrize("k", [2, 3, 4, 5, 6])
@pytest.mark.parametrize("ordinal", [True, False])
def test_item_map_fills_differ_in_lightness(k: int, ordinal: bool) -> None:
    fills = charts.category_fills(k, ordinal=ordinal)
    assert len(fills) == k
    lstar = [charts.lightness(f) for f in fills]
    for a, b in itertools.combinations(lstar, 2):
        assert abs(a - b) >= charts.MIN_LIGHTNESS_STEP, (k, ordinal, lstar)
    # white (a missing rating) is told apart by its hatch, never by its fill
    assert charts.MISSING_HATCH and all(x < 100 - 3 for x in lstar)


def test_lightness_of_known_colours() -> None:
    # CIE L* of sRGB black, white and mid grey #777777 (L* 50.0 for 119/255): CIE 1976
    # lightness formula with the sRGB transfer curve, IEC 61966-2-1 (1999)
    assert charts.lightness("#000000") == pytest.approx(0.0, abs=1e-9)
    assert charts.lightness("#ffffff") == pytest.approx(100.0, abs=1e-6)
    assert charts.lightness("#777777") == pytest.approx(50.03, abs=0.05)


def test_steps_apart_legend_entries_differ_by_lightness_or_pattern() -> None:
    svg = charts.steps_apart(
        "s",
        "t",
        [-1, 0, 1],
        [(f"R{i}", [1, 5, 2]) for i in range(6)],
        alt="a",
    ).svg
    assert svg.count(b"<pattern") >= 3  # the hatches are drawn
    fills, hatches = charts.STEPS_FILLS, charts.STEPS_HATCHES
    for (fa, ha), (fb, hb) in itertools.combinations(zip(fills, hatches, strict=True), 2):
        assert ha != hb or abs(charts.lightness(fa) - charts.lightness(fb)) >= 15, (fa, fb)


def test_missing_ratings_have_their_own_pattern_in_the_item_map() -> None:
    args: tuple[Any, ...] = (
        ["I1", "I2", "I3"],
        ["A t1", "B t1"],
        ["Good", "Bad"],
        [0, 1, 0],
    )
    full = charts.item_map("m", "t", [[0, 0], [1, 0], [0, 1]], *args, ordinal=False, alt="a")
    gap = charts.item_map("m", "t", [[0, 0], [1, -1], [0, 1]], *args, ordinal=False, alt="a")
    # the legend shows the missing pattern in both; the cell adds one more hatched patch
    assert full.svg.count(b"fill: url(#h") >= 1
    assert gap.svg.count(b"fill: url(#h") == full.svg.count(b"fill: url(#h") + 1


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_history_pdf_keeps_every_column_on_the_page(tmp_path: Path) -> None:
    from _revisions import make_revision

    from reportgen.archive import archive_revision
    from reportgen.history import load_history, render_history_html, render_history_pdf

    out, root = tmp_path / "output", tmp_path / "archive"
    for sid, rev, date, kappa in (
        ("SEAL-CHECK", 1, "2026-01-15", 0.80),
        ("SEAL-CHECK", 2, "2026-01-20", 0.82),
        ("SEAL-CHECK-27", 1, "2027-01-10", 0.55),
    ):
        archive_revision(make_revision(out, sid, rev, date=date, kappa=kappa), archive_dir=root)
    when = dt.datetime(2027, 2, 1, 9, 0, tzinfo=dt.UTC)
    entries, series = load_history(root)
    html = render_history_html(entries, series, generated_at=when)
    pdf = tmp_path / "history.pdf"
    pdf.write_bytes(render_history_pdf(html, generated_at=when))
    pages = L.read_pages(pdf)
    assert L.overlapping_words(pages) == []
    # before the fix the "Built with" column of the archive table started at x = 594 of 595
    past = [
        f"page {p.number}: {w.text!r} at x {w.x0:.0f}"
        for p in pages
        for w in p.words
        if w.x1 > p.width - 10 * L.MM
    ]
    assert past == []
    text = " ".join(w.text for p in pages for w in p.words)
    for heading in (
        "Built",
        "Archived",
        "Station",
        "Characteristic",
        "Panel",
        "effectiveness",
    ):
        assert heading in text


@pytest.mark.render
@pytest.mark.slow
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_run_sheets_have_no_text_over_text(tmp_path: Path) -> None:
    import shutil

    from reportgen.plan import load_items, make_plan, plan_settings, write_plan
    from reportgen.study import load_study

    src = Path(__file__).resolve().parents[2] / "studies" / "seal-check"
    shutil.copytree(src, tmp_path / "seal-check")
    study_file = tmp_path / "seal-check" / "study.yaml"
    study = load_study(study_file)
    items = load_items(study_file.parent / "items.csv", study)
    settings = plan_settings(study, seed=11, today=dt.date(2026, 11, 2))
    plan_dir = write_plan(
        make_plan(study, items, settings), study, output_dir=tmp_path / "out", pdf=True
    )
    sheets = sorted((plan_dir / "sheets").glob("*.pdf"))
    assert sheets
    for sheet in sheets[:3]:
        pages = L.read_pages(sheet)
        assert pages and L.overlapping_words(pages) == [], sheet.name
        assert all(w.x1 <= p.width for p in pages for w in p.words), sheet.name


def test_the_overlap_reader_finds_text_over_text() -> None:
    """The reader itself, on two hand-made pages: touching lines pass, crossing words fail."""
    a = L.Word(1, "Matching", 100, 50, 140, 60, 1)
    b = L.Word(1, "Ratings", 135, 50, 170, 60, 2)
    below = L.Word(1, "next", 100, 59, 130, 69, 3)  # touches the line above by 1 pt
    assert L.overlapping_words([L.Page(1, 595, 842, (a, below))]) == []
    assert len(L.overlapping_words([L.Page(1, 595, 842, (a, b))])) == 1


def test_the_heading_reader_finds_a_stranded_caption() -> None:
    words = (
        L.Word(1, "Some", 50, 700, 80, 710, 1),
        L.Word(1, "text.", 82, 700, 110, 710, 1),
        L.Word(1, "Hard", 50, 720, 80, 730, 2),
        L.Word(1, "items", 82, 720, 110, 730, 2),
        L.Word(1, "footer", 50, 820, 80, 830, 3),  # in the bottom margin: not body text
    )
    pages = [L.Page(1, 595, 842, words), L.Page(2, 595, 842, ())]
    assert L.stranded_headings(pages, ["Hard items"], top=TOP, bottom=BOTTOM) == [
        "page 1 ends with the heading 'Hard items'"
    ]
    assert L.stranded_headings(pages, ["Other"], top=TOP, bottom=BOTTOM) == []
