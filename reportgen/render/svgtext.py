"""Chart text as one SVG path per label, instead of one ``<use>`` per glyph.

matplotlib's SVG writer, with ``svg.fonttype = "path"``, defines each glyph once and places every
letter of every label with its own ``<use>`` element inside a ``<g>``.  A report's charts thus
hold a few thousand elements, and WeasyPrint pays for each one when it draws the page (the
cost grows with the number of elements, not with their size).  :func:`install` replaces that
writer's text method, in this process only, with one that draws the whole label as a single
``<path>`` carrying the same transform and fill: the same outlines (from the same
``TextToPath``), the same place, still vector and independent of installed fonts, and about one
element per label.  Called once, from :func:`reportgen.render.charts._plt`.
"""

from __future__ import annotations

import re
from typing import Any

_INSTALLED = False
#: matplotlib's own method, kept for the tests that compare the two drawings
ORIGINAL: Any = None


def install() -> None:
    """Make matplotlib's SVG renderer draw each text as one path (idempotent)."""
    global _INSTALLED
    if _INSTALLED:
        return
    from matplotlib.backends import backend_svg

    global ORIGINAL
    ORIGINAL = backend_svg.RendererSVG._draw_text_as_path
    backend_svg.RendererSVG._draw_text_as_path = _draw_text_as_one_path
    _INSTALLED = True


def _draw_text_as_one_path(
    self: Any,
    gc: Any,
    x: float,
    y: float,
    s: str,
    prop: Any,
    angle: float,
    ismath: Any,
    mtext: Any = None,
) -> None:
    from matplotlib.backends.backend_svg import _generate_css, _generate_transform, _short_float_fmt
    from matplotlib.colors import rgb2hex
    from matplotlib.path import Path

    text2path = self._text2path
    features = language = None
    if mtext is not None:
        features, language = mtext.get_fontfeatures(), mtext.get_language()
    verts, codes = text2path.get_text_path(
        prop, s, ismath=ismath, features=features, language=language
    )
    if not len(verts):
        return  # blank text: nothing to draw (matplotlib wrote an empty group)
    style: dict[str, str] = {}
    color = rgb2hex(gc.get_rgb())
    if color != "#000000":
        style["fill"] = color
    alpha = gc.get_alpha() if gc.get_forced_alpha() else gc.get_rgb()[3]
    if alpha != 1:
        style["opacity"] = _short_float_fmt(alpha)
    font_scale = prop.get_size_in_points() / text2path.FONT_SCALE
    self.writer.element(
        "path",
        d=self._convert_path(Path(verts, codes), simplify=False),
        style=_generate_css(style),
        transform=_generate_transform(
            [
                ("translate", (x, y)),
                ("rotate", (-angle,)),
                ("scale", (font_scale, -font_scale)),
            ]
        ),
    )


_GROUP = re.compile(rb"<(/?)g\b([^>]*?)(/?)>")
_ID_ONLY = re.compile(rb'\s*(id="[^"]*")?\s*')


def flatten_groups(svg: bytes) -> bytes:
    """Drop the ``<g>`` elements that carry nothing but an ``id`` (or nothing at all).

    matplotlib wraps every artist in such a group (``<g id="xtick_3">``); they change nothing
    that is drawn (no style, transform or clip), yet WeasyPrint visits each one.  Their
    children move up one level, unchanged and in order; empty groups go.  Comments (matplotlib
    writes one per text) go too.  Groups with any other attribute are kept as written.
    """
    svg = re.sub(rb"<!--.*?-->\n?", b"", svg, flags=re.S)
    out: list[bytes] = []
    stack: list[bool] = []  # per open <g>: was it dropped?
    pos = 0
    for m in _GROUP.finditer(svg):
        closing, attrs, selfclosing = m.group(1), m.group(2), m.group(3)
        plain = _ID_ONLY.fullmatch(attrs) is not None
        if closing:
            dropped = stack.pop()
        elif selfclosing:
            dropped = plain
        else:
            dropped = plain
            stack.append(dropped)
        if dropped:
            out.append(svg[pos : m.start()].rstrip(b" "))
            pos = m.end()
            if svg[pos : pos + 1] == b"\n":
                pos += 1
    out.append(svg[pos:])
    if stack:  # unbalanced: leave the document as matplotlib wrote it
        return svg
    return b"".join(out)
