"""The HTML report: structure, self-containment, CSP, figures equal to results.json, templates."""

from __future__ import annotations

import re
from html.parser import HTMLParser
from pathlib import Path

import pytest

from reportgen.errors import RenderError
from reportgen.render.filters import fmt_estimate, fmt_pct

from .conftest import SECTION_TITLES, Built, build, small_study


class _Doc(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict[str, str | None]]] = []
        self.h2: list[str] = []
        self._in_h2 = False
        self._buf: list[str] = []
        self.text: list[str] = []
        self._skip = 0

    def handle_starttag(self, tag, attrs):  # type: ignore[no-untyped-def]
        self.tags.append((tag, dict(attrs)))
        if tag == "h2":
            self._in_h2, self._buf = True, []
        if tag in ("style", "script"):
            self._skip += 1

    def handle_endtag(self, tag):  # type: ignore[no-untyped-def]
        if tag == "h2":
            self._in_h2 = False
            self.h2.append(" ".join("".join(self._buf).split()))
        if tag in ("style", "script"):
            self._skip -= 1

    def handle_data(self, data):  # type: ignore[no-untyped-def]
        if self._in_h2:
            self._buf.append(data)
        if not self._skip:
            self.text.append(data)


def parse(html: str) -> _Doc:
    d = _Doc()
    d.feed(html)
    d.close()
    return d


def headings(html: str) -> list[str]:
    return [re.sub(r"^\d+\s+", "", h) for h in parse(html).h2]


def test_sections_in_order(built_binary: Built, built_ordinal: Built, built_nominal: Built) -> None:
    expected = [t for t in SECTION_TITLES if t != "Ordered-scale agreement"]
    assert headings(built_binary.html) == expected
    assert headings(built_nominal.html) == expected
    assert headings(built_ordinal.html) == SECTION_TITLES


def test_self_contained_and_locked_down(built_binary: Built) -> None:
    doc = parse(built_binary.html)
    assert not any(tag == "script" for tag, _ in doc.tags)
    csp = [
        a
        for tag, a in doc.tags
        if tag == "meta" and a.get("http-equiv") == "Content-Security-Policy"
    ]
    assert len(csp) == 1
    policy = csp[0]["content"] or ""
    assert (
        "default-src 'none'" in policy and "script-src" not in policy and "img-src data:" in policy
    )
    for tag, attrs in doc.tags:
        for name in ("src", "href", "data", "action", "poster"):
            value = attrs.get(name)
            if value is None:
                continue
            assert value.startswith(("data:", "#")), f"<{tag} {name}={value[:60]}> leaves the file"
        assert not any(k.startswith("on") for k in attrs), f"event handler on <{tag}>"
    # fonts and charts are inline
    assert built_binary.html.count("@font-face") >= 3
    assert 'src: url("data:font/ttf;base64,' in built_binary.html
    assert 'url("fonts/' not in built_binary.html
    assert built_binary.html.count('<img src="data:image/svg+xml;base64,') >= 3


def test_chart_files_match_embedded(built_binary: Built) -> None:
    import base64

    svgs = sorted(p.name for p in built_binary.folder.glob("*.svg"))
    # no per-category chart on a binary scale: its two rows are the same figure
    assert svgs == ["confusion.svg", "item-map.svg", "rater-figures.svg"]
    for p in built_binary.folder.glob("*.svg"):
        uri = "data:image/svg+xml;base64," + base64.b64encode(p.read_bytes()).decode()
        assert uri in built_binary.html, p.name


def test_ordinal_has_steps_apart_chart(built_ordinal: Built) -> None:
    assert (built_ordinal.folder / "steps-apart.svg").is_file()
    assert not (built_ordinal.folder / "steps-apart.svg").read_bytes().count(b"<dc:date>")


def test_figures_equal_results(built_binary: Built) -> None:
    r = built_binary.results
    text = " ".join(" ".join(parse(built_binary.html).text).split())
    # the verdict, in words
    assert r["verdict"]["outcome"] in text and r["verdict"]["sentence"].split(":")[0] in text
    # the multi-rater table: Fleiss' kappa row shows the estimate of results.json
    fk = r["reproducibility"]["fleiss_kappa"]
    assert re.search(r"Fleiss' kappa " + re.escape(fmt_estimate(fk)), text)
    # each rater's effectiveness, as a percentage with its count
    for rid, acc in r["accuracy"].items():
        eff = acc["effectiveness"]
        assert f"Effectiveness {fmt_pct(eff)}" in text, rid
    # completeness counts
    assert (
        f"{r['design']['ratings']} of {r['design']['ratings'] + r['design']['missing']} expected ratings"
        in text
    )


def test_plain_words_reading_beside_numbers(built_binary: Built) -> None:
    # every figures table row has a non-empty reading cell
    rows = re.findall(r'<td class="reading">(.*?)</td>', built_binary.html, flags=re.S)
    assert len(rows) > 10
    assert all(len(x.strip()) > 10 for x in rows)


def test_safety_caution(built_binary: Built, built_ordinal: Built) -> None:
    assert built_binary.study.safety_related
    assert "supports, and does not replace, the customer&#39;s requirements" in built_binary.html
    assert not built_ordinal.study.safety_related
    assert "does not replace" not in built_ordinal.html


def test_metadata_tags(built_binary: Built) -> None:
    h = built_binary.html
    assert '<meta name="dcterms.created" content="2026-11-20T09:00:00Z">' in h
    assert f"<title>{built_binary.study.id} revision 1:" in h


# ---- templates: strict undefined, override folder, sandbox ---------------------------------


def _override_study(tmp_path: Path, template: str) -> Path:
    folder = tmp_path / "s"
    (folder / "company").mkdir(parents=True)
    (folder / "company" / "report.html").write_text(template, encoding="utf-8")
    return small_study(folder, report={"templates": "company"})


def test_override_extends_default(tmp_path: Path) -> None:
    tpl = '{% extends "default:report.html" %}{% block title %}ACME cover — {{ study.id }}{% endblock %}'
    b = build(_override_study(tmp_path, tpl), tmp_path / "out", pdf=False)
    assert "<title>ACME cover — TEST-01</title>" in b.html
    assert headings(b.html)[0] == "Summary and verdict"
    assert "company templates from folder <bdi>company</bdi> (report.html)" in b.html


@pytest.mark.parametrize(
    ("template", "message"),
    [
        ("{{ ''.__class__.__mro__[1].__subclasses__() }}{{ font_css }}", "not allowed"),
        ("{{ study.titel }}{{ font_css }}", "template error"),
        ("{% if %}", "template error"),
        ("<p>{{ study.id }}</p>", "font_css"),
    ],
)
def test_override_errors(tmp_path: Path, template: str, message: str) -> None:
    with pytest.raises(RenderError, match=message):
        build(_override_study(tmp_path, template), tmp_path / "out", pdf=False)
    assert not (tmp_path / "out" / "TEST-01").exists() or not any(
        (tmp_path / "out" / "TEST-01").iterdir()
    )


def test_charts_deterministic_and_rasterised() -> None:
    from reportgen.render import charts

    grid = [[(i + c) % 3 for c in range(6)] for i in range(200)]
    items = [f"I{i:03d}" for i in range(200)]
    cols = [f"R{c}" for c in range(6)]
    args = ("item-map", "t", grid, items, cols, ["A", "B", "C"], [i % 3 for i in range(200)])
    a = charts.item_map(*args, ordinal=True, alt="a")
    b = charts.item_map(*args, ordinal=True, alt="a")
    assert a.svg == b.svg
    svg = a.svg.decode()
    assert "<image" in svg  # the 1,200 cells are one raster image, not 1,200 vector marks
    assert svg.count("<rect") < 50
    assert "<dc:date>" not in svg
    pts = [charts.Point("$R1$ <b>", 0.8, 0.7, 0.9), charts.Point("R2", None, None, None)]
    c = charts.interval_panels("p", "t", [("x", pts, charts.Band(0.75, 0.4), (0.0, 1.0))], alt="a")
    assert c.svg.startswith(b"<?xml") and b"<script" not in c.svg
    assert c.data_uri.startswith("data:image/svg+xml;base64,")
