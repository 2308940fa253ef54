"""Charts with fewer SVG elements draw the same picture (``reportgen/render/svgtext.py``).

Each label is one ``<path>`` instead of one ``<use>`` per glyph, and the ``<g>`` wrappers that
carry only an ``id`` are gone.  The picture must not change: the same chart is drawn both ways,
each SVG is put through WeasyPrint on its own page and rasterised with poppler's ``pdftoppm``,
and the pixels are compared.
"""

from __future__ import annotations

import io
import re
import subprocess
import xml.dom.minidom
from pathlib import Path

import numpy as np
import pytest

from reportgen.render import charts, svgtext

pytestmark = pytest.mark.render


def _elements(svg: bytes) -> int:
    return len(re.findall(rb"<[a-zA-Z]", svg))


def _sample_charts() -> list[charts.Chart]:
    pts = [
        charts.Point("Rater Ålesund", 0.81, 0.7, 0.9),
        charts.Point("R2 (night)", 0.64, 0.52, 0.74),
        charts.Point("R3", None, None, None),
    ]
    panels = [
        ("Repeatability", pts, charts.Band(0.9, 0.8), (0.0, 1.0)),
        ("Weighted kappa", pts, charts.Band(0.75, 0.4), (0.0, 1.0)),
    ]
    maps = [("R1", [[9, 1, 0], [2, 7, 1], [0, 1, 9]]), ("R2", [[8, 2, 0], [1, 8, 1], [0, 0, 10]])]
    return [
        charts.interval_panels("panels", "t", panels, alt="a"),
        charts.confusion_maps("confusion", "t", maps, ["Good", "Light marks", "Scrap"], alt="a"),
        charts.steps_apart(
            "steps", "t", [-1, 0, 1], [("R1", [2, 20, 3]), ("R2", [1, 22, 2])], alt="a"
        ),
    ]


def _old_way() -> list[charts.Chart]:
    """The same charts as matplotlib writes them: a <use> per glyph, every group kept."""
    from matplotlib.backends import backend_svg

    charts._plt()  # installs ours and keeps matplotlib's
    ours = backend_svg.RendererSVG._draw_text_as_path
    real_flatten = svgtext.flatten_groups
    backend_svg.RendererSVG._draw_text_as_path = svgtext.ORIGINAL
    svgtext.flatten_groups = lambda svg: svg
    try:
        return _sample_charts()
    finally:
        backend_svg.RendererSVG._draw_text_as_path = ours
        svgtext.flatten_groups = real_flatten


def _raster(svg: bytes, tmp: Path, name: str) -> np.ndarray:
    import weasyprint
    from PIL import Image

    pdf = tmp / f"{name}.pdf"
    uri = charts.Chart(name, svg, "", "").data_uri
    html = f'<html><body style="margin:0"><img style="width:17cm" src="{uri}"></body></html>'
    weasyprint.HTML(string=html).write_pdf(pdf)
    png = subprocess.run(
        ["pdftoppm", "-r", "110", "-png", "-f", "1", "-l", "1", str(pdf)],
        check=True,
        capture_output=True,
    ).stdout
    return np.asarray(Image.open(io.BytesIO(png)).convert("L"), dtype=np.int16)


def test_labels_are_single_paths_and_plain_groups_are_gone() -> None:
    new = _sample_charts()
    old = _old_way()
    for a, b in zip(old, new, strict=True):
        xml.dom.minidom.parseString(b.svg)  # still well-formed
        assert b'<use xlink:href="#DejaVu' in a.svg  # matplotlib's glyph references…
        assert b'<use xlink:href="#DejaVu' not in b.svg  # …replaced by one path per label
        assert re.search(rb'<g id="[^"]*">', a.svg)
        assert not re.search(rb'<g( id="[^"]*")?/?>', b.svg)  # id-only and empty groups dropped
        assert b"<!--" not in b.svg
        assert _elements(b.svg) < 0.5 * _elements(a.svg), (
            a.name,
            _elements(a.svg),
            _elements(b.svg),
        )
        # hatched bands stay (greyscale-safe patterns are drawn, not dropped)
        assert a.svg.count(b"<pattern") == b.svg.count(b"<pattern")


def test_the_picture_is_the_same(tmp_path: Path) -> None:
    for a, b in zip(_old_way(), _sample_charts(), strict=True):
        ra, rb = _raster(a.svg, tmp_path, a.name + "-old"), _raster(b.svg, tmp_path, b.name)
        assert ra.shape == rb.shape
        diff = np.abs(ra - rb)
        assert (ra < 200).sum() > 2000  # a real picture, not a blank page
        # anti-aliasing of glyph edges may differ by a few grey levels on a few pixels
        assert diff.mean() < 0.2, (a.name, diff.mean())
        assert (diff > 64).mean() < 0.001, (a.name, (diff > 64).sum())


def test_flatten_keeps_groups_with_attributes_and_order() -> None:
    svg = (
        b'<svg xmlns="http://www.w3.org/2000/svg">\n'
        b' <g id="figure_1">\n'
        b'  <g id="patch_1">\n   <path d="M 0 0 L 1 1"/>\n  </g>\n'
        b'  <g clip-path="url(#c)">\n   <path d="M 2 2"/>\n  </g>\n'
        b'  <g id="empty"/>\n'
        b"  <!-- a comment -->\n"
        b'  <g style="fill: #fff">\n   <g>\n    <path d="M 3 3"/>\n   </g>\n  </g>\n'
        b" </g>\n</svg>\n"
    )
    out = svgtext.flatten_groups(svg)
    xml.dom.minidom.parseString(out)
    assert re.findall(rb'd="([^"]*)"', out) == [b"M 0 0 L 1 1", b"M 2 2", b"M 3 3"]
    assert b'<g clip-path="url(#c)">' in out and b'<g style="fill: #fff">' in out
    assert b"figure_1" not in out and b"patch_1" not in out and b"empty" not in out
    assert out.count(b"<g") == out.count(b"</g>") == 2
    # a document whose groups do not balance is left as written
    assert svgtext.flatten_groups(b"<svg><g id='x'>") == b"<svg><g id='x'>"
