"""One WeasyPrint font configuration per process (``reportgen.render.pdf.shared_font_config``).

The shipped fonts are registered once, and the PDFs are the bytes a fresh configuration gives.
"""

from __future__ import annotations

import datetime as dt

import pytest

from reportgen.render import pdf as pdf_module

pytestmark = pytest.mark.render

WHEN = dt.datetime(2026, 11, 20, 9, 0, tzinfo=dt.UTC)


def _html(n: int) -> str:
    rows = "".join(f"<tr><td>{i}</td><td>Light marks · 合格 {i * n}</td></tr>" for i in range(40))
    return (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><title>sheet</title>'
        '<meta name="dcterms.created" content="2026-11-20T09:00:00Z">'
        "<style>"
        '@font-face { font-family: "T Sans"; src: url("fonts/DejaVuSans.ttf"); }'
        '@font-face { font-family: "T CJK"; src: url("fonts/DroidSansFallback.ttf"); }'
        'body { font-family: "T Sans", "T CJK"; }'
        f"</style></head><body><h1>Sheet {n}</h1><table>{rows}</table></body></html>"
    )


def test_font_faces_are_registered_once_and_pdfs_do_not_change(
    monkeypatch: pytest.MonkeyPatch,
) -> None:
    from weasyprint.text.fonts import FontConfiguration

    fetched: list[str] = []
    real_make = pdf_module.make_fetcher

    def counting_fetcher(root=None):  # type: ignore[no-untyped-def]
        f = real_make(root)
        real_fetch = f.fetch

        def fetch(url, headers=None):  # type: ignore[no-untyped-def]
            if url.endswith(".ttf"):
                fetched.append(url.rsplit("/", 1)[-1])
            return real_fetch(url, headers)

        f.fetch = fetch
        return f

    monkeypatch.setattr(pdf_module, "make_fetcher", counting_fetcher)
    monkeypatch.setattr(pdf_module, "_FONT_CONFIG", None)
    shared = [pdf_module.render_pdf(_html(n), generated_at=WHEN) for n in range(3)]
    # three documents, each naming two faces: each font file read once in the process
    assert sorted(fetched) == ["DejaVuSans.ttf", "DroidSansFallback.ttf"]

    fresh = []
    for n in range(3):
        monkeypatch.setattr(pdf_module, "_FONT_CONFIG", FontConfiguration())
        fresh.append(pdf_module.render_pdf(_html(n), generated_at=WHEN))
    assert shared == fresh  # byte for byte
    assert len(set(shared)) == 3
