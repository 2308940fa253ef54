"""Context → one self-contained HTML file (CSS, fonts and charts inlined).

Fonts: the shipped DejaVu Sans (regular, bold, mono) is subset with fontTools to the
characters the report actually contains and embedded as ``data:`` URIs, so the same file
renders the same in a browser under a script- and network-free Content-Security-Policy and
in WeasyPrint.  Text that DejaVu lacks (CJK) is covered by the shipped Droid Sans Fallback,
embedded only when needed.  A character no shipped font covers (an emoji in a rater name,
say) stops the build with a message naming the character and where it was found: a signed
record must show names as they were entered, not as boxes.
"""

from __future__ import annotations

import base64
import functools
import io
import unicodedata
from dataclasses import dataclass, fields
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

from ..errors import RenderError
from .context import ReportContext
from .environment import builtin_template_dir, make_environment

FONT_SENTINEL = "/*reportgen:font-face*/"

#: characters always kept in the font subsets (labels the CSS and templates may add)
BASE_CHARS = (
    "".join(chr(c) for c in range(0x20, 0x7F))
    + "".join(chr(c) for c in range(0xA0, 0x100))
    + ("–—‘’‚“”„•…‰′″‹›€−±×÷≤≥≈≠√∑·→←↑↓✓✗κατχρπΣΔαβγδεμσωₒₑₖᵢⱼ₀₁₂₃²³ ")
)

FACES = (
    # family, weight, file
    ("Report Sans", "normal", "DejaVuSans.ttf"),
    ("Report Sans", "bold", "DejaVuSans-Bold.ttf"),
    ("Report Mono", "normal", "DejaVuSansMono.ttf"),
)
FALLBACK = ("Report Sans Wide", "normal", "DroidSansFallback.ttf")


@dataclass(frozen=True)
class RenderedHtml:
    html: str  #: the self-contained HTML file (fonts embedded as data: URIs)
    print_html: (
        str  #: the same document with the fonts referenced from the package (for WeasyPrint)
    )
    templates: tuple[str, ...]  # templates used (for the appendix and the tests)


class _TextCollector(HTMLParser):
    """Collects the text nodes of the document (not <style>/<script> content)."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.parts: list[str] = []
        self._skip = 0

    def handle_starttag(self, tag: str, attrs: Any) -> None:
        if tag in ("style", "script"):
            self._skip += 1

    def handle_endtag(self, tag: str) -> None:
        if tag in ("style", "script") and self._skip:
            self._skip -= 1

    def handle_data(self, data: str) -> None:
        if not self._skip:
            self.parts.append(data)


def document_text(html: str) -> str:
    p = _TextCollector()
    p.feed(html)
    p.close()
    return "".join(p.parts)


def font_path(name: str) -> Path:
    return builtin_template_dir() / "fonts" / name


@functools.lru_cache(maxsize=8)
def _cmap(name: str) -> frozenset[int]:
    from fontTools.ttLib import TTFont

    path = font_path(name)
    if not path.is_file():
        raise RenderError(
            f"the shipped font {name} is missing from {path.parent}; reinstall reportgen"
        )
    with TTFont(str(path), lazy=True) as font:  # reads the cmap table only
        return frozenset(font.getBestCmap())


@functools.lru_cache(maxsize=32)
def _subset(name: str, text: str) -> bytes:
    from fontTools.ttLib import TTFont

    with TTFont(str(font_path(name)), recalcTimestamp=False) as font:
        return _subset_font(font, text)


def _subset_font(font: Any, text: str) -> bytes:
    from fontTools import subset

    opts = subset.Options()
    opts.layout_features = ["*"]  # keep shaping for Arabic, Hebrew, ligatures
    opts.name_IDs = ["*"]  # keep copyright and licence entries
    opts.name_languages = ["*"]
    opts.hinting = False
    opts.notdef_outline = True
    opts.recalc_timestamp = False
    sub = subset.Subsetter(opts)
    sub.populate(text=text)
    import logging

    logging.getLogger("fontTools").setLevel(logging.ERROR)
    sub.subset(font)
    buf = io.BytesIO()
    font.save(buf)
    return buf.getvalue()


def _ignorable(ch: str) -> bool:
    cat = unicodedata.category(ch)
    return cat in ("Cc", "Cf", "Zl", "Zp") or ch in "\n\r\t"


def check_glyphs(text: str) -> tuple[str, str]:
    """(characters for the main faces, characters that need the wide fallback face).

    Raises RenderError naming every character that no shipped font covers.
    """
    main = _cmap(FACES[0][2])
    chars = {c for c in text if not _ignorable(c)}
    outside = {c for c in chars if ord(c) not in main}
    wide = _cmap(FALLBACK[2]) if outside else frozenset()  # 3.4 MB font: only when needed
    need_wide = sorted(c for c in outside if ord(c) in wide)
    missing = sorted(c for c in outside if ord(c) not in wide)
    if missing:
        shown = ", ".join(f"U+{ord(c):04X} {unicodedata.name(c, '?')}" for c in missing[:8])
        where = text.find(missing[0])
        snippet = " ".join(text[max(0, where - 40) : where + 20].split())
        raise RenderError(
            f"the report text holds characters no shipped font can draw: {shown} "
            f"(first seen in: '…{snippet}…'); change the text in the study definition or ratings "
            "(names, labels, item ids) or add a font that covers them"
        )
    return "".join(sorted(chars - set(need_wide))), "".join(need_wide)


def font_face_css(main_chars: str, wide_chars: str, *, embed: bool = True) -> str:
    """@font-face rules: subset fonts as data: URIs (``embed``), or the package's font files.

    The PDF is rendered with ``embed=False``: WeasyPrint loads the shipped TTFs through the
    restricted fetcher (relative to the package template folder) and subsets them itself,
    which avoids parsing half a megabyte of base64 in CSS.
    """
    keep = "".join(sorted(set(main_chars) | set(BASE_CHARS)))

    def src(name: str, text: str) -> str:
        if not embed:
            return f'url("fonts/{name}") format("truetype")'
        data = base64.b64encode(_subset(name, text)).decode("ascii")
        return f'url("data:font/ttf;base64,{data}") format("truetype")'

    rules = []
    for family, weight, name in FACES:
        rules.append(
            f'@font-face {{ font-family: "{family}"; font-weight: {weight}; font-style: normal; src: {src(name, keep)}; }}'
        )
    if wide_chars:
        family, weight, name = FALLBACK
        wide_src = src(name, wide_chars)
        for w in ("normal", "bold"):
            rules.append(
                f'@font-face {{ font-family: "{family}"; font-weight: {w}; font-style: normal; src: {wide_src}; }}'
            )
    return "\n".join(rules)


def render_html(ctx: ReportContext, *, override_dir: Path | None = None) -> RenderedHtml:
    """Render the report template with ``ctx`` and embed the fonts; returns the finished HTML."""
    import jinja2

    env = make_environment(override_dir)
    used: list[str] = []
    orig = env.loader.get_source  # type: ignore[union-attr]

    def tracking(environment: Any, name: str) -> Any:
        used.append(name)
        return orig(environment, name)

    env.loader.get_source = tracking  # type: ignore[union-attr,method-assign]
    values = {f.name: getattr(ctx, f.name) for f in fields(ctx)}
    values["font_css"] = FONT_SENTINEL
    try:
        html = env.get_template("report.html").render(**values)
    except jinja2.TemplateSyntaxError as exc:
        raise RenderError(
            f"{exc.filename or exc.name}:{exc.lineno}: template error: {exc.message}"
        ) from None
    except jinja2.UndefinedError as exc:
        raise RenderError(
            f"template error: {exc.message} (a template uses a name the report context lacks)"
        ) from None
    except jinja2.TemplateNotFound as exc:
        raise RenderError(f"template not found: {exc.name}") from None
    except jinja2.exceptions.SecurityError as exc:
        raise RenderError(f"an override template tried something not allowed: {exc}") from None
    main, wide = check_glyphs(document_text(html))
    if html.count(FONT_SENTINEL) != 1:
        raise RenderError(
            "the report template must include {{ font_css }} exactly once, inside <style>"
        )
    return RenderedHtml(
        html.replace(FONT_SENTINEL, font_face_css(main, wide, embed=True)),
        html.replace(FONT_SENTINEL, font_face_css(main, wide, embed=False)),
        tuple(dict.fromkeys(used)),
    )
