"""Regression tests for defects found in a hands-on audit of charts, the history PDF, run sheets
and `reportgen plan`: Korean names, fonts installed on the machine, and planning before the
ratings file exists.  Names and studies are invented.
"""

from __future__ import annotations

import datetime as dt
import io
import warnings
from pathlib import Path

import pypdf
import pytest
from _revisions import make_revision

from reportgen.archive import archive_revision
from reportgen.history import load_history, render_history_html, render_history_pdf

FONTS = Path(__file__).resolve().parent.parent / "templates" / "fonts"
KOREAN = (
    "김민준"  # Hangul: in the shipped Droid Sans Fallback, not in Debian's DroidSansFallbackFull
)


def test_charts_use_the_shipped_fonts_even_when_the_machine_has_same_named_ones() -> None:
    """Defect: matplotlib chose /usr/share/fonts/…/DroidSansFallbackFull.ttf (family "Droid Sans
    Fallback", no Hangul) over the shipped file, so charts depended on the machine and drew
    Korean names as empty boxes."""
    from matplotlib import font_manager

    from reportgen.render.charts import _plt, _register_fonts, _style, _svg

    _register_fonts()
    assert (
        Path(font_manager.findfont("Droid Sans Fallback")).resolve()
        == (FONTS / "DroidSansFallback.ttf").resolve()
    )
    assert (
        Path(font_manager.findfont("DejaVu Sans")).resolve() == (FONTS / "DejaVuSans.ttf").resolve()
    )
    plt = _plt()
    _style(plt, "qa-korean")
    fig, ax = plt.subplots(figsize=(2, 1))
    ax.set_title(f"{KOREAN} 张伟")
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # a missing glyph is a UserWarning from matplotlib
        svg = _svg(fig)
    assert svg.startswith(b"<?xml")


@pytest.mark.slow
@pytest.mark.render
def test_history_pdf_draws_korean_names_with_the_shipped_font(tmp_path: Path) -> None:
    """Defect: the trend report had no CJK font face and stopped with exit 3 ('.notdef glyph')
    for a Korean inspector name (and drew Chinese with whatever the machine had)."""
    root = tmp_path / "archive"
    archive_revision(
        make_revision(tmp_path / "output", "SEAL-CHECK", 1, raters={"I1": KOREAN, "I2": "王芳"}),
        archive_dir=root,
    )
    entries, series = load_history(root)
    when = dt.datetime(2027, 2, 1, 9, 0, tzinfo=dt.UTC)
    html = render_history_html(entries, series, generated_at=when, filters={})
    assert '@font-face { font-family: "RG CJK"; src: url("fonts/DroidSansFallback.ttf"); }' in html
    pdf = render_history_pdf(html, generated_at=when)
    reader = pypdf.PdfReader(io.BytesIO(pdf))
    text = "".join(page.extract_text() for page in reader.pages)
    assert KOREAN in text and "王芳" in text
    fonts = set()
    for page in reader.pages:
        for f in page["/Resources"]["/Font"].values():
            fonts.add(str(f.get_object()["/BaseFont"]).split("+")[-1])
    assert "RG-CJK" in fonts


def test_plan_needs_no_ratings_file_yet(tmp_path: Path, run_cli) -> None:
    """Defect: `plan` refused a study whose ratings file (to be filled after the trials) did not
    exist yet: 'ratings file not found'."""
    study = tmp_path / "study.yaml"
    study.write_text(
        """study: {id: PLAN-FIRST, title: "Weld spatter by eye"}
scale: binary
categories: [{code: OK, label: Clean}, {code: SP, label: Spatter}]
defect_category: SP
raters: [{id: W1, name: "Ines Caro"}, {id: W2, name: "김민준"}]
trials: 2
ratings: plan/ratings-entry.csv
reference: items.csv
key: plan/key/key.csv
plan: {seed: 11}
""",
        encoding="utf-8",
    )
    (tmp_path / "items.csv").write_text(
        "item,reference,borderline\n"
        + "".join(f"W{i:02d},{'SP' if i % 3 == 0 else 'OK'},no\n" for i in range(1, 13)),
        encoding="utf-8",
    )
    code, _, err = run_cli(
        "plan",
        study,
        "--items",
        tmp_path / "items.csv",
        "--output",
        tmp_path / "out",
        "--no-pdf",
        "-q",
        "--start",
        "2026-12-07",
    )
    assert code == 0, err
    sheet = (tmp_path / "out" / "PLAN-FIRST" / "plan" / "sheets" / "W2-trial-1.html").read_text(
        encoding="utf-8"
    )
    assert "김민준" in sheet and '"RG CJK"' in sheet
    # check still insists on the inputs
    code, _, err = run_cli("check", study)
    assert code == 2 and "ratings file not found" in err


def _studied(html: str) -> str:
    import html as html_lib
    import re

    m = re.search(r'<p class="studied">(.*?)</p>', html, re.S)
    assert m is not None
    return html_lib.unescape(re.sub(r"<[^>]+>", "", m.group(1)))


@pytest.mark.render
def test_summary_sentence_counts_and_absent_raters(make_study, tmp_path: Path) -> None:
    """Defects on the report's first page: '1 raters rated 1 items', 'on a ordinal scale', and a
    rater who gave no rating at all counted among the raters who rated every item."""
    from conftest import default_ratings, default_reference

    from reportgen.render.build import build_report
    from reportgen.study import load_study

    when = "2026-11-20T09:00:00Z"
    rows = [
        r
        for r in default_ratings(
            default_reference(30, ["P", "S", "X"]), ["R1", "R2", "R3"], 2, ["P", "S", "X"]
        )
        if r[1] != "R3"
    ]
    silent = load_study(
        make_study(
            tmp_path / "a",
            ratings_rows=rows,
            missing="allow",
            bootstrap={"resamples": 0, "seed": 1},
        )
    )
    folder = build_report(silent, output_dir=tmp_path / "out", generated_at=when, pdf=False)
    assert _studied((folder / "TEST-01-rev1.html").read_text(encoding="utf-8")) == (
        "3 raters rated 30 items 2 times each on an ordinal scale of 3 categories. "
        "60 of the 180 ratings are absent; R3 gave no rating at all."
    )
    one = load_study(
        make_study(
            tmp_path / "b",
            study={"id": "ONE"},
            n_items=1,
            trials=1,
            raters=["R1"],
            bootstrap={"resamples": 0, "seed": 1},
        )
    )
    folder = build_report(one, output_dir=tmp_path / "out", generated_at=when, pdf=False)
    assert _studied((folder / "ONE-rev1.html").read_text(encoding="utf-8")) == (
        "1 rater rated 1 item 1 time each on an ordinal scale of 3 categories."
    )


def test_a_bad_source_date_epoch_is_bad_input_not_an_internal_error(
    make_study, run_cli, monkeypatch
) -> None:
    """Defect: SOURCE_DATE_EPOCH=abc ended `build` with exit 70 (matplotlib's int() failed)."""
    monkeypatch.setenv("SOURCE_DATE_EPOCH", "abc")
    out = Path(make_study()).parent / "out"
    code, _, err = run_cli("build", make_study(), "-o", out, "--no-pdf", "-q")
    assert code == 2
    assert "SOURCE_DATE_EPOCH: error: must be a whole number of seconds" in err
    assert not out.exists()


def test_history_marks_a_study_without_date(tmp_path: Path) -> None:
    """Defect: an undated study was listed under its archive date as if it were the study date."""
    from reportgen.history import format_text

    root = tmp_path / "archive"
    when = dt.datetime(2026, 3, 1, 12, 0, tzinfo=dt.UTC)
    archive_revision(
        make_revision(tmp_path / "output", "SEAL-CHECK", 1, date=None), archive_dir=root, now=when
    )
    entries, series = load_history(root)
    text = format_text(entries, series)
    assert (
        "2026-03-01  SEAL-CHECK rev1" in text
        and "[no study date: the archive date is shown]" in text
    )
    html = render_history_html(entries, series, generated_at=when, filters={})
    assert "2026-03-01 (archived; no study date)" in html


def _plan_study(tmp_path: Path, raters: str) -> Path:
    study = tmp_path / "study.yaml"
    study.write_text(
        f"""study: {{id: PLAN-IDS, title: "Weld spatter by eye"}}
scale: binary
categories: [{{code: OK, label: Clean}}, {{code: SP, label: Spatter}}]
defect_category: SP
raters: {raters}
trials: 2
ratings: ratings.csv
plan: {{seed: 3}}
""",
        encoding="utf-8",
    )
    (tmp_path / "items.csv").write_text(
        "item,reference\n"
        + "".join(f"W{i:02d},{'SP' if i % 3 == 0 else 'OK'}\n" for i in range(1, 13)),
        encoding="utf-8",
    )
    return study


def test_plan_refuses_raters_whose_sheet_files_would_clash(tmp_path: Path, run_cli) -> None:
    """Defect: rater ids 'B M' and 'B_M' both map to run sheets named B_M-trial-<n>."""
    study = _plan_study(tmp_path, '["B M", "B_M"]')
    code, _, err = run_cli(
        "plan",
        study,
        "--items",
        tmp_path / "items.csv",
        "--output",
        tmp_path / "out",
        "--no-pdf",
        "-q",
    )
    assert code == 2
    assert (
        "raters 'B M' and 'B_M' would get run sheet files of the same name (B_M-trial-1.csv)" in err
    )
    assert not (tmp_path / "out").exists()


def test_an_overlong_rater_id_is_refused(tmp_path: Path, run_cli) -> None:
    """Defect: a 260-character rater id ended `plan` with exit 70 ('File name too long')."""
    study = _plan_study(tmp_path, f'["{"R" * 260}", R2]')
    code, _, err = run_cli(
        "plan",
        study,
        "--items",
        tmp_path / "items.csv",
        "--output",
        tmp_path / "out",
        "--no-pdf",
        "-q",
    )
    assert code == 2 and "raters[0]: rater id has 260 characters; at most 64 are allowed" in err
    assert not (tmp_path / "out").exists()
