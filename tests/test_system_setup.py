"""Set-up on a fresh machine: the one list of system packages, the checker that `make demo`,
`make test` and CI share, and which WeasyPrint messages fail a build."""

from __future__ import annotations

import datetime as dt
import importlib.util
import logging
import re
import sys
from pathlib import Path

import pytest

from reportgen.render import pdf as pdfmod

ROOT = Path(__file__).resolve().parent.parent


def _ensure():
    spec = importlib.util.spec_from_file_location("ensure", ROOT / "system" / "ensure.py")
    mod = importlib.util.module_from_spec(spec)
    sys.modules["ensure"] = mod  # dataclasses look their module up there
    spec.loader.exec_module(mod)
    return mod


# Every message WeasyPrint 70 logs at warning or error level that can reach a report build,
# worded as in its source, with what it must do to the build.
KNOWN_MESSAGES = [
    ('.notdef glyph rendered for Unicode string unsupported by fonts: "ก" (U+0E01)', "fail"),
    ('Too many glyphs missing from "Report Sans", expect text selection problems', "fail"),
    ("Font-face 'Report Sans' cannot be loaded", "fail"),
    ('Unable to instantiate "Report Sans" variable font', "fail"),
    ('Unable to save emoji font "Noto"', "fail"),
    ("Failed to load image at 'data:image/svg+xml;base64,AAA': broken", "fail"),
    ("Failed to render SVG image data:image/svg+xml;base64,AAA", "fail"),
    ("Failed to load inline SVG: not well-formed", "fail"),
    ("Unknown image mode: CMYK", "fail"),
    ("Failed to load stylesheet at file:///x.css: gone", "fail"),
    ("Unsupported stylesheet type text/plain for file:///x.txt", "fail"),
    ("Relative URI reference without a base URI: <img src='x.png'>", "fail"),
    ('Missing href in <link rel="attachment">', "fail"),
    ("This row has more columns than the table, ignored 2 cells", "fail"),
    ("refused resource: file:///etc/passwd", "fail"),
    (
        'Using fontTools instead of HarfBuzz-Subset for font "Report Sans". This will be '
        "unsupported in future versions of WeasyPrint. Please install HarfBuzz-Subset >= 4.1.0 "
        "with your package manager.",
        "notice",
    ),
    (
        "Please install HarfBuzz version 13+ with harfbuzz-vector to display Noto COLR emoji fonts.",
        "notice",
    ),
    ("Ignored `break-inside: avoid-column` at 3:5, invalid value.", "notice"),
    ("Subgrids are unsupported", "notice"),
    ("Anchor defined twice: 'verdict'", "notice"),
]


@pytest.mark.parametrize(("message", "expected"), KNOWN_MESSAGES)
def test_every_known_weasyprint_message_is_classified(message: str, expected: str) -> None:
    assert pdfmod.classify_message(message) == expected


def test_the_fonttools_notice_has_our_own_words_and_is_shown_once(capsys) -> None:
    pdfmod._NOTED.clear()
    msg = KNOWN_MESSAGES[15][0]
    pdfmod._note_once(msg)
    pdfmod._note_once(msg)
    err = capsys.readouterr().err
    assert err.count("note: PDF renderer:") == 1
    assert "libharfbuzz-subset0" in err and "complete" in err


@pytest.mark.render
def test_fonttools_fallback_builds_the_pdf(monkeypatch, capsys) -> None:
    """Without the HarfBuzz subset library WeasyPrint falls back to fontTools and says so;
    the build must succeed (it failed with exit 3 before) and keep the note out of the PDF."""
    import weasyprint.pdf.fonts as wfonts

    monkeypatch.setattr(wfonts, "harfbuzz_subset", None)
    pdfmod._NOTED.clear()
    seen: list[str] = []

    class Catch(logging.Handler):
        def emit(self, record: logging.LogRecord) -> None:
            seen.append(record.getMessage())

    handler = Catch(logging.WARNING)
    logging.getLogger("weasyprint").addHandler(handler)
    try:
        html = (
            "<html><head><style>@font-face{font-family:'Report Sans';"
            "src:url(fonts/DejaVuSans.ttf)} body{font-family:'Report Sans'}</style></head>"
            "<body><p>Seal check</p></body></html>"
        )
        out = pdfmod.render_pdf(html, generated_at=dt.datetime(2026, 1, 1, tzinfo=dt.UTC))
    finally:
        logging.getLogger("weasyprint").removeHandler(handler)
    assert any("fontTools instead of HarfBuzz-Subset" in m for m in seen)
    assert out.startswith(b"%PDF-")
    assert b"HarfBuzz" not in out and b"fontTools" not in out
    assert capsys.readouterr().err.count("note: PDF renderer:") == 1


def test_missing_glyph_still_fails_the_build() -> None:
    from reportgen.errors import RenderError

    html = (
        "<html><head><style>@font-face{font-family:'Report Sans';"
        "src:url(fonts/DejaVuSans.ttf)} body{font-family:'Report Sans'}</style></head>"
        "<body><p>\U0001d11e\U000e0100</p></body></html>"
    )
    with pytest.raises(RenderError, match="notdef"):
        pdfmod.render_pdf(html, generated_at=dt.datetime(2026, 1, 1, tzinfo=dt.UTC))


def test_package_list_separates_runtime_from_test() -> None:
    ens = _ensure()
    rows = ens.read_list()
    runtime = {p.debian for p in ens.wanted(rows, "runtime")}
    test = {p.debian for p in ens.wanted(rows, "test")}
    assert {"libpango-1.0-0", "libpangoft2-1.0-0", "libharfbuzz-subset0"} <= runtime
    assert not runtime & {"chromium", "poppler-utils", "qpdf"}
    assert {"chromium", "poppler-utils", "qpdf"} <= test and runtime <= test


def test_missing_packages_stop_with_the_install_commands(monkeypatch, capsys) -> None:
    ens = _ensure()
    monkeypatch.setattr(ens, "dpkg_installed", lambda name: None)
    monkeypatch.setattr(ens, "probe", lambda p: p.debian != "libharfbuzz-subset0")
    monkeypatch.setattr(ens, "can_install", lambda: None)
    assert ens.main(["runtime"]) == 1
    err = capsys.readouterr().err
    assert "libharfbuzz-subset0" in err
    assert "sudo apt-get install -y libharfbuzz-subset0" in err
    assert "sudo dnf install -y harfbuzz" in err
    assert "brew install harfbuzz" in err
    assert "pango" not in err.split("\n")[0].replace("reportgen", "")


def test_nothing_missing_is_silent(monkeypatch, capsys) -> None:
    ens = _ensure()
    monkeypatch.setattr(ens, "dpkg_installed", lambda name: True)
    assert ens.main(["test"]) == 0
    assert capsys.readouterr().err == ""


def test_installs_with_apt_where_allowed(monkeypatch) -> None:
    ens = _ensure()
    state = {"installed": False}
    monkeypatch.setattr(ens, "dpkg_installed", lambda name: state["installed"] or name != "qpdf")
    monkeypatch.setattr(ens, "can_install", lambda: [])
    calls: list[list[str]] = []

    def fake_install(prefix, names):
        calls.append(names)
        state["installed"] = True
        return True

    monkeypatch.setattr(ens, "install", fake_install)
    assert ens.main(["test"]) == 0
    assert calls == [["qpdf"]]


def test_make_and_ci_use_the_one_list() -> None:
    make = (ROOT / "Makefile").read_text()
    demo = re.search(r"^demo:(.*)\n((?:\t.*\n)+)", make, re.M)
    test = re.search(r"^test:(.*)\n((?:\t.*\n)+)", make, re.M)
    assert "system-runtime" in demo.group(1) and "system-test" in test.group(1)
    assert "system/ensure.py runtime" in make and "system/ensure.py test" in make
    # make demo installs the runtime dependencies only; the test extras belong to make test
    runtime_rule = re.search(r"^\$\(RUNTIME_STAMP\):.*\n((?:\t.*\n)+)", make, re.M).group(1)
    assert "-e ." in runtime_rule and "[test]" not in runtime_rule
    ci = (ROOT / ".ci" / "run").read_text()
    assert "make test" in ci and "apt-get install" not in ci
