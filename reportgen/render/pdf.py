"""HTML → PDF/A-3b with WeasyPrint: a locked-down URL fetcher, fixed dates, attachments.

* Only ``data:`` URLs and files inside the package's own template folder
  (``reportgen/templates``: fonts, assets) may be loaded.  Anything else — ``file:`` paths
  elsewhere, ``http:``, symlinks leading out — is refused, and because the fetcher runs with
  ``fail_on_errors=True`` the render stops; :func:`render_pdf` turns that into a
  :class:`~reportgen.errors.RenderError` that names the refused URL.
* Messages WeasyPrint only logs are sorted by :func:`classify_message` against two explicit
  lists: those that mean the page is not what the template asked for (a glyph missing from
  every font, a refused or failed resource, an image or stylesheet that cannot be read) fail
  the render; notices (the fontTools subsetting fallback) are shown once per process on
  stderr as a note and never reach the report.  Anything on neither list is a notice too.
* Attachments get fixed creation and modification dates (the ``generated at`` time), so the
  same inputs give byte-identical PDFs.

WeasyPrint is imported only inside the functions.
"""

from __future__ import annotations

import datetime as dt
import logging
import mimetypes
import sys
import urllib.request
import warnings
from collections.abc import Mapping, Sequence
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


_FONT_CONFIG: Any = None


def shared_font_config() -> Any:
    """One WeasyPrint ``FontConfiguration`` per process, so that the shipped fonts named in
    ``@font-face`` rules are read and registered with fontconfig once, not once per document
    (a plan renders a PDF per run sheet, ``demo`` a report per study).  WeasyPrint keys each
    face by its descriptors, which include the URL, so a face is only reused for the same file;
    the PDFs are byte for byte those of a fresh configuration (tests/render/test_pdf_fonts.py)."""
    global _FONT_CONFIG
    if _FONT_CONFIG is None:
        from weasyprint.text.fonts import FontConfiguration

        _FONT_CONFIG = FontConfiguration()
    return _FONT_CONFIG


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
    metadata: Mapping[str, str] | None = None,
) -> bytes:
    """Render finished HTML to PDF/A-3b bytes; raise RenderError on any refused URL or warning.

    ``metadata`` entries are written into the PDF's document information (and only they: other
    ``<meta>`` names of the HTML are not), e.g. the report's state (see ``buildrecord.STATE_KEY``).
    """
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
        ).render(font_config=shared_font_config())
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
            doc.metadata.custom = dict(sorted((metadata or {}).items()))
            pdf = doc.write_pdf(
                pdf_variant=PDF_VARIANT, attachments=atts, custom_metadata=bool(metadata)
            )
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
    serious = [m for m in handler.messages if classify_message(m) == "fail"]
    if serious:
        raise RenderError("PDF rendering reported problems: " + "; ".join(serious[:5]))
    if fetcher.refused:
        raise RenderError(
            "the report refers to a resource that is not allowed: " + ", ".join(fetcher.refused[:3])
        )
    for m in handler.messages:
        _note_once(m)
    return bytes(pdf)


# WeasyPrint log messages that fail a build: the page would not show what the template asked
# for.  Each entry is a lower-case fragment of the message as WeasyPrint 62-70 words it.
FAILING_MESSAGES: tuple[tuple[str, str], ...] = (
    (".notdef glyph rendered", "a character is missing from every shipped font"),
    ("too many glyphs missing", "characters are missing from a font"),
    ("cannot be loaded", "a font could not be loaded"),
    ("unable to instantiate", "a variable font could not be set up"),
    ("unable to save emoji font", "an emoji font could not be embedded"),
    ("failed to load image", "an image could not be read"),
    ("failed to render svg image", "a chart could not be drawn"),
    ("failed to load inline svg", "a chart could not be drawn"),
    ("unknown image mode", "an image could not be read"),
    ("failed to load stylesheet", "a stylesheet could not be read"),
    ("unsupported stylesheet type", "a stylesheet could not be read"),
    ("refused resource", "a resource was refused"),
    ("blocked", "a resource was refused"),
    ("relative uri reference without a base uri", "a resource could not be located"),
    ('missing href in <link rel="attachment">', "an attachment has no source"),
    ("more columns than the table", "table cells were dropped"),
)

# Messages that are notices only: the output is complete and correct.
NOTICE_MESSAGES: tuple[tuple[str, str], ...] = (
    (
        "using fonttools instead of harfbuzz-subset",
        "fonts are subset with fontTools because the HarfBuzz subset library is not "
        "installed; the PDF is complete (install libharfbuzz-subset0 for faster builds)",
    ),
    ("harfbuzz version 13+ with harfbuzz-vector", "colour emoji fonts are drawn without colour"),
)

_NOTED: set[str] = set()


def classify_message(message: str) -> str:
    """``"fail"`` for a message on :data:`FAILING_MESSAGES`, else ``"notice"``."""
    low = message.lower()
    if any(fragment in low for fragment, _ in FAILING_MESSAGES):
        return "fail"
    return "notice"


def notice_text(message: str) -> str:
    """The note shown for a notice: our own words where the message is known, else its text."""
    low = message.lower()
    for fragment, words in NOTICE_MESSAGES:
        if fragment in low:
            return words
    return message.strip().splitlines()[0][:300]


def _note_once(message: str) -> None:
    text = notice_text(message)
    if text in _NOTED:
        return
    _NOTED.add(text)
    print(f"note: PDF renderer: {text}", file=sys.stderr)
