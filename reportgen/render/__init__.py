"""The report: results → charts → HTML → PDF/A-3b → one revision folder.

Modules (dependencies point one way: ``stats`` ← ``analysis`` ← ``render`` ← ``commands``):

* :mod:`.build` — ``build_report(study, *, output_dir, generated_at=None, replace=False, progress=None)``
  and the atomic folder write;
* :mod:`.context` — the documented template context (:class:`~.context.ReportContext`);
* :mod:`.environment` — the Jinja2 environment (autoescape, StrictUndefined, filters, loaders,
  sandbox for company templates);
* :mod:`.filters` and :mod:`.readings` — number formatting and plain-words readings;
* :mod:`.measures` — what the method statement says about each measure; bibliography, glossary;
* :mod:`.charts` — matplotlib charts as SVG (palette documented there);
* :mod:`.html` — the self-contained HTML (font subsetting, glyph coverage check);
* :mod:`.pdf` — WeasyPrint PDF/A-3b with attachments and a locked-down URL fetcher.

Nothing here imports Jinja2, matplotlib, WeasyPrint or fontTools at module level.
"""

from __future__ import annotations

__all__ = ["build_report"]


def build_report(*args, **kwargs):  # type: ignore[no-untyped-def]
    """See :func:`reportgen.render.build.build_report`."""
    from .build import build_report as _build

    return _build(*args, **kwargs)
