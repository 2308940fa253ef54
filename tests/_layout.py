"""Test helper: read a PDF page as a person would, from its text layer.

Word boxes come from poppler's ``pdftotext -bbox-layout`` (a test system package listed in
system/packages.tsv). Each word carries its page, its box in points (origin top left) and the
line it was set on. The checks below are the ones the layout tests apply to every PDF we make:

- ``overlapping_words``: two words whose boxes cross (text printed over text);
- ``stranded_headings``: a heading, table caption or glossary term that is the last line of the
  body on a page (its text then starts on the next page).
"""

from __future__ import annotations

import html.parser
import re
import subprocess
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path


@dataclass(frozen=True)
class Word:
    page: int
    text: str
    x0: float
    y0: float
    x1: float
    y1: float
    line: int  # running number of the line the word belongs to, over the whole document


@dataclass(frozen=True)
class Page:
    number: int
    width: float
    height: float
    words: tuple[Word, ...]


def read_pages(pdf: Path) -> list[Page]:
    """Every page of ``pdf`` with its words and their boxes."""
    out = subprocess.run(
        ["pdftotext", "-bbox-layout", str(pdf), "-"],
        check=True,
        capture_output=True,
    ).stdout.decode("utf-8")
    # the XHTML head carries the document's metadata unescaped at times: parse the body only
    body = out[out.index("<doc>") : out.index("</doc>") + len("</doc>")]
    root = ET.fromstring(body)
    pages: list[Page] = []
    line_no = 0
    for n, page in enumerate(root.iter("page"), start=1):
        words: list[Word] = []
        for line in page.iter("line"):
            line_no += 1
            for w in line.iter("word"):
                words.append(
                    Word(
                        n,
                        w.text or "",
                        float(w.get("xMin")),
                        float(w.get("yMin")),
                        float(w.get("xMax")),
                        float(w.get("yMax")),
                        line_no,
                    )
                )
        pages.append(Page(n, float(page.get("width")), float(page.get("height")), tuple(words)))
    return pages


def overlapping_words(pages: list[Page]) -> list[str]:
    """Pairs of words printed over each other: their boxes share more than a sliver.

    The box of a word spans the font's ascent and descent, so boxes of lines set close together
    touch; two words count as overlapping when they share at least 1 pt across and at least
    40 % of the smaller height.
    """
    found: list[str] = []
    for page in pages:
        ws = sorted(page.words, key=lambda w: w.x0)
        for i, a in enumerate(ws):
            for b in ws[i + 1 :]:
                if b.x0 >= a.x1 - 1.0:
                    break
                dx = min(a.x1, b.x1) - max(a.x0, b.x0)
                dy = min(a.y1, b.y1) - max(a.y0, b.y0)
                h = min(a.y1 - a.y0, b.y1 - b.y0)
                if dx >= 1.0 and dy >= 0.4 * h:
                    found.append(
                        f"page {page.number}: {a.text!r} at ({a.x0:.0f}, {a.y0:.0f}) overlaps "
                        f"{b.text!r} at ({b.x0:.0f}, {b.y0:.0f})"
                    )
    return found


def body_lines(page: Page, top: float, bottom: float) -> list[str]:
    """The lines of text in the page body (between the top and bottom margins), top to bottom."""
    lines: dict[int, list[Word]] = {}
    for w in page.words:
        if w.y0 >= top and w.y1 <= page.height - bottom:
            lines.setdefault(w.line, []).append(w)
    ordered = sorted(lines.values(), key=lambda ws: (max(w.y1 for w in ws), ws[0].x0))
    return [" ".join(w.text for w in sorted(ws, key=lambda w: w.x0)) for ws in ordered]


class _Headings(html.parser.HTMLParser):
    """Texts of h1–h4, caption and dt elements of an HTML document."""

    TAGS = {"h1", "h2", "h3", "h4", "caption", "dt"}

    def __init__(self) -> None:
        super().__init__()
        self.depth = 0
        self.buf: list[str] = []
        self.found: list[str] = []

    def handle_starttag(self, tag: str, attrs: object) -> None:
        if tag in self.TAGS:
            self.depth += 1

    def handle_endtag(self, tag: str) -> None:
        if tag in self.TAGS and self.depth:
            self.depth -= 1
            if not self.depth:
                text = " ".join("".join(self.buf).split())
                if text:
                    self.found.append(text)
                self.buf = []

    def handle_data(self, data: str) -> None:
        if self.depth:
            self.buf.append(data)


def heading_texts(html_text: str) -> list[str]:
    p = _Headings()
    p.feed(html_text)
    return p.found


def _norm(text: str) -> str:
    return re.sub(r"\s+", " ", text).strip()


def stranded_headings(
    pages: list[Page], headings: list[str], *, top: float, bottom: float
) -> list[str]:
    """Pages whose last body line is a heading, a table caption or a glossary term (or the end
    of one that wraps). The last page is exempt: nothing follows it."""
    # one-word terms ("reference") also end ordinary lines of table cells: headings of two or
    # more words only
    heads = [_norm(h) for h in headings if len(_norm(h).split()) >= 2]
    found: list[str] = []
    for page in pages[:-1]:
        lines = [_norm(x) for x in body_lines(page, top, bottom)]
        if not lines:
            continue
        tail = ""
        for k in range(1, min(4, len(lines)) + 1):
            tail = _norm(" ".join(lines[-k:]))
            hit = next((h for h in heads if h == tail), None)
            if hit is not None:
                found.append(f"page {page.number} ends with the heading {hit!r}")
                break
            if not any(h.endswith(tail) for h in heads):
                break
    return found


MM = 72 / 25.4


def svg_width_pt(svg: bytes) -> float:
    """The natural width of a matplotlib SVG, in points."""
    m = re.search(rb'<svg[^>]*\swidth="([0-9.]+)pt"', svg)
    assert m, "an SVG chart without a width in points"
    return float(m.group(1))


def svg_text_sizes(svg: bytes, print_width_pt: float) -> list[float]:
    """Sizes in points, at print size, of the text of a matplotlib SVG drawn with
    ``svg.fonttype = path``: each glyph run is placed with ``scale(s -s)`` where ``s`` is the
    font size over 100. The chart is printed at its natural width unless that is wider than the
    text width of the page (``print_width_pt``), in which case it is shrunk to fit."""
    shrink = min(1.0, print_width_pt / svg_width_pt(svg))
    return [
        100 * float(a) * shrink
        for a, b in re.findall(
            rb'transform="translate\([^)]*\)(?: rotate\([^)]*\))? scale\(([0-9.]+) -([0-9.]+)\)"',
            svg,
        )
    ]
