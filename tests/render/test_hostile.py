"""Hostile input: markup, links, very long names, right-to-left and CJK text, uncovered glyphs.

The report must stay safe (escaped text, nothing fetched) and readable (every glyph drawn from a
shipped font), or stop with a clear message.
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pypdf
import pytest

from reportgen.errors import RenderError

from .conftest import Built, build, pdftotext_pages, small_study

LONG = "Bartholomew-" * 25 + "End"  # 303 characters, no space
HOSTILE_RATERS = [
    {"id": "R1", "name": '<script>alert("x")</script><img src=x onerror=alert(1)>'},
    {"id": "R2", "name": "שרה כהן"},  # Hebrew, right to left
    {"id": "R3", "name": "山田 太郎"},  # CJK: not in DejaVu, drawn with the shipped fallback
    {"id": "R4", "name": LONG},
]
HOSTILE_CATEGORIES = [
    {
        "code": "P",
        "label": '<a href="file:///etc/passwd">Premium</a>',
        "description": "see http://127.0.0.1:9/x.png",
    },
    {"code": "S", "label": "مقبول"},  # Arabic
    {"code": "X", "label": "不良品 ![x](file:///etc/hostname)"},
]


@pytest.fixture(scope="module")
def hostile(tmp_path_factory: pytest.TempPathFactory) -> Built:
    base = tmp_path_factory.mktemp("hostile")
    s = small_study(
        base / "s",
        raters=HOSTILE_RATERS,
        categories=HOSTILE_CATEGORIES,
        study={
            "title": '<b>Bold</b> & "quoted" title',
            "station": "javascript:alert(1)",
            "purpose": "$x^2$ math-looking",
        },
        signoff={"prepared_by": "</td></tr></table><h2>Injected</h2>"},
    )
    return build(s, base / "out")


def test_markup_is_text(hostile: Built) -> None:
    h = hostile.html
    assert "<script>" not in h and "onerror=alert" not in h.replace("onerror=alert(1)&gt;", "")
    assert "&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt;" in h
    assert (
        '<a href="file:' not in h
        and "&lt;a href=&#34;file:///etc/passwd&#34;&gt;Premium&lt;/a&gt;" in h
    )
    assert "<h2>Injected</h2>" not in h
    assert len(re.findall(r"<h2 ", h)) == len(re.findall(r"<h2", h))  # every h2 is ours (has an id)
    # no attribute carries user text as a URL
    for m in re.finditer(r'\s(?:src|href)="([^"]*)"', h):
        assert m.group(1).startswith(("data:", "#")), m.group(0)[:80]


def test_rtl_cjk_and_long_names_render(hostile: Built) -> None:
    assert hostile.pdf is not None
    text = " ".join(pdftotext_pages(hostile.pdf_path))
    compact = re.sub(r"\s+", "", text)
    assert "山田" in compact and "太郎" in compact
    assert "不良品" in compact
    # Hebrew and Arabic come out of the PDF (pdftotext may give them in visual order)
    assert ("שרה" in text or "הרש" in text) and ("כהן" in text or "ןהכ" in text)
    assert (
        "مقبول" in text
        or "لوبقم" in text
        or "ﻣﻘﺒﻮﻝ" in text
        or len(re.findall(r"[\u0600-\u06ff\ufe70-\ufeff]", text)) >= 5
    )
    assert LONG[:40] in compact  # the long name is wrapped, not cut
    assert "$x^2$" in compact


@pytest.mark.skipif(not shutil.which("pdffonts"), reason="poppler-utils (pdffonts) not installed")
def test_cjk_drawn_with_shipped_fallback(hostile: Built) -> None:
    out = subprocess.run(
        ["pdffonts", str(hostile.pdf_path)], capture_output=True, text=True, check=True
    ).stdout
    assert "Report-Sans-Wide" in out
    for row in out.splitlines()[2:]:
        assert "+Report-" in row.split()[0], row


def test_fallback_embedded_in_html_only_when_needed(hostile: Built, built_binary: Built) -> None:
    assert hostile.html.count('font-family: "Report Sans Wide"') == 2
    assert 'font-family: "Report Sans Wide"' not in built_binary.html


def test_no_attachment_smuggled(hostile: Built) -> None:
    atts = pypdf.PdfReader(str(hostile.pdf_path)).attachments
    assert sorted(atts) == [
        "build-record.json",
        "ratings.csv",
        "reference.csv",
        "results.json",
        "study.yaml",
    ]


def test_uncovered_glyph_fails_clearly(tmp_path: Path) -> None:
    s = small_study(
        tmp_path / "s",
        raters=[
            {"id": "R1", "name": "Ann अनु"},
            {"id": "R2", "name": "Bo"},
            {"id": "R3", "name": "Cy"},
        ],
    )
    with pytest.raises(RenderError) as exc:
        build(s, tmp_path / "out")
    msg = str(exc.value)
    assert "U+0905" in msg and "DEVANAGARI" in msg and "Ann" in msg and "no shipped font" in msg
    assert not (tmp_path / "out" / "TEST-01" / "rev1").exists()


def test_uncovered_glyph_in_a_chart_label_fails_before_charts(tmp_path: Path) -> None:
    cats = [
        {"code": "P", "label": "Premium"},
        {"code": "S", "label": "ठीक"},
        {"code": "X", "label": "Scrap"},
    ]
    with pytest.raises(RenderError, match="U\\+0920"):
        build(small_study(tmp_path / "s", categories=cats), tmp_path / "out")
