"""HTML → PDF/A-3b with WeasyPrint: a locked-down URL fetcher, fixed dates, attachments.

* Only ``data:`` URLs and files inside the package's own template folder
  (``reportgen/templates``: fonts, assets) may be loaded.  Anything else — ``file:`` paths
  elsewhere, ``http:``, symlinks leading out — is refused, and because the fetcher runs with
  ``fail_on_errors=True`` the render stops; :func:`render_pdf` turns that into a
  :class:`~reportgen.errors.RenderError` that names the refused URL.
* Warnings WeasyPrint only logs (a font that cannot be loaded, a ``.notdef`` glyph) are
  collected and also fail the render: a report never falls back silently.
* Attachments get fixed creation and modification dates (the ``generated at`` time), so the
  same inputs give byte-identical PDFs.

WeasyPrint is imported only inside the functions.
"""

from __future__ import annotations

import datetime as dt
import logging
import mimetypes
import urllib.request
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

from ..errors import RenderError

PDF_VARIANT = "pdf/a-3b"


def asset_root() -> Path:
    """The package's template folder (fonts, CSS, assets): the only folder the fetcher may read."""
    from .environment import builtin_template_dir

    return builtin_template_dir()


@dataclass(frozen=True)
class PdfAttachment:
    name: str
    data: bytes
    description: str
    relationship: str = "Source"  # PDF/A-3 AFRelationship: Source | Data | Supplement …


def make_fetcher(root: Path | None = None) -> Any:
    """A ``weasyprint.URLFetcher`` subclass instance allowing only ``data:`` and ``root``."""
    import weasyprint
    from weasyprint.urls import URLFetcherResponse

    allowed_root = (root or asset_root()).resolve()

    class SafeFetcher(weasyprint.URLFetcher):  # type: ignore[misc]
        """data: URLs, and file: URLs inside one folder; everything else is refused."""

        def __init__(self, **kw: Any) -> None:
            super().__init__(allowed_protocols={"file", "data"}, **kw)
            self.root = allowed_root
            self.refused: list[str] = []

        def fetch(self, url: str, headers: Any = None) -> Any:
            scheme = url.split(":", 1)[0].lower()
            if scheme == "data":
                return super().fetch(url, headers)
            if scheme == "file":
                p = Path(urllib.request.url2pathname(urlsplit(url).path)).resolve()
                if p.is_relative_to(self.root) and p.is_file():
                    return URLFetcherResponse(url, body=p.read_bytes())
            self.refused.append(url)
            raise PermissionError(f"refused resource: {url[:200]}")

    return SafeFetcher(fail_on_errors=True)


class _Collect(logging.Handler):
    def __init__(self) -> None:
        super().__init__(logging.WARNING)
        self.messages: list[str] = []

    def emit(self, record: logging.LogRecord) -> None:
        self.messages.append(record.getMessage())


def render_pdf(
    html: str,
    *,
    generated_at: dt.datetime,
    attachments: Sequence[PdfAttachment] = (),
    base_url: Path | None = None,
) -> bytes:
    """Render finished HTML to PDF/A-3b bytes; raise RenderError on any refused URL or warning."""
    import weasyprint

    for ext, mime in (
        (".yaml", "application/yaml"),
        (".yml", "application/yaml"),
        (".csv", "text/csv"),
        (".json", "application/json"),
    ):
        mimetypes.add_type(mime, ext)
    when = (
        generated_at.astimezone(dt.UTC).replace(tzinfo=None)
        if generated_at.tzinfo
        else generated_at
    )
    fetcher = make_fetcher()
    handler = _Collect()
    logger = logging.getLogger("weasyprint")
    logger.addHandler(handler)
    try:
        root = base_url or asset_root()
        doc = weasyprint.HTML(
            string=html, base_url=root.as_uri() + "/", url_fetcher=fetcher
        ).render()
        atts = [
            weasyprint.Attachment(
                string=a.data,
                name=a.name,
                description=a.description,
                created=when,
                modified=when,
                relationship=a.relationship,
            )
            for a in attachments
        ]
        with warnings.catch_warnings():
            # WeasyPrint 70 opens its sRGB profile for PDF/A and never closes it
            warnings.simplefilter("ignore", ResourceWarning)
            pdf = doc.write_pdf(pdf_variant=PDF_VARIANT, attachments=atts)
    except BaseException as exc:  # FatalURLFetchingError derives from BaseException
        if type(exc).__name__ == "FatalURLFetchingError" or fetcher.refused:
            what = ", ".join(fetcher.refused[:3]) or str(exc)
            raise RenderError(
                f"the report refers to a resource that is not allowed: {what}; only data: URLs and "
                "the package's own fonts and assets may be loaded"
            ) from None
        if isinstance(exc, (KeyboardInterrupt, SystemExit)):
            raise
        if isinstance(exc, RenderError):
            raise
        raise RenderError(f"PDF rendering failed: {type(exc).__name__}: {exc}") from exc
    finally:
        logger.removeHandler(handler)
    serious = [m for m in handler.messages if _is_serious(m)]
    if serious:
        raise RenderError("PDF rendering reported problems: " + "; ".join(serious[:5]))
    if fetcher.refused:
        raise RenderError(
            "the report refers to a resource that is not allowed: " + ", ".join(fetcher.refused[:3])
        )
    return bytes(pdf)


def _is_serious(message: str) -> bool:
    low = message.lower()
    return any(
        s in low
        for s in (
            "cannot be loaded",
            "notdef",
            "failed to load",
            "refused",
            "blocked",
            "failed to render",
            "unsupported",
        )
    )
