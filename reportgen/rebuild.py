"""Prove the whole document: rebuild a report from its own attachments and compare.

Builds are byte-identical for the same inputs, build time and software, so ``verify`` rebuilds
the report with the build pipeline itself (:func:`reportgen.render.build.render_report`) from
the attached inputs and the attached build record (build time, state, software versions, plan
summary, company templates) and compares:

* the **original revision** of the file — its bytes up to the first end-of-file marker, i.e.
  the part before any signature update — with the rebuilt PDF, byte for byte;
* when the bytes differ and the report was built by other software versions than the ones
  installed, the text of every page and the annotations of every page, listing each difference
  (page, expected, found);
* anything **appended** after the original revision (incremental updates: annotations, form
  fields, new page content): a report that is not signed must have nothing appended; a signed
  one may have only signature updates, each ending where a signature's coverage ends, adding
  nothing but signature fields.
"""

from __future__ import annotations

import difflib
import io
import re
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

from .pdftail import _annotations

_SPACES = re.compile(r"\s+")
#: differences listed at most
MAX_DIFFERENCES = 12


@dataclass
class Rebuilt:
    pdf: bytes
    results: dict[str, Any]
    seconds: float = 0.0


@dataclass
class DocumentCheck:
    """What the comparison with the rebuild found."""

    ok: bool
    message: str
    details: list[str] = field(default_factory=list)


def rebuild_report(
    attachments: dict[str, bytes],
    study_name: str,
    record: Any,
    *,
    progress: Callable[[str], None] | None = None,
) -> Rebuilt:
    """Rebuild the report PDF from its attachments and build record (``buildrecord.BuildRecord``).

    Raises InputError when the attached inputs cannot be loaded, ValueError when an input is
    missing, RenderError when the report cannot be rendered.
    """
    import time

    from .attached import materialise
    from .ratings import load_ratings
    from .render.build import compute_results, render_report
    from .study import load_study

    say = progress or (lambda _m: None)
    t0 = time.perf_counter()
    with materialise(attachments, study_name, templates=record.templates) as (path, sources):
        say("loading the attached inputs")
        study = load_study(path)
        ratings = load_ratings(study)
        say("recomputing")
        results = compute_results(study, ratings)
        say("rebuilding the report")
        rendered = render_report(
            study,
            ratings,
            results,
            generated_at=record.when(),
            draft=record.draft,
            plan=record.plan,
            software=record.software,
            sources=sources,
        )
    assert rendered.pdf is not None
    return Rebuilt(rendered.pdf, results, time.perf_counter() - t0)


def _page_views(data: bytes) -> list[tuple[str, list[str]]]:
    """(text, annotation descriptions) of every page."""
    import pypdf

    reader = pypdf.PdfReader(io.BytesIO(data))
    out = []
    for page in reader.pages:
        text = _SPACES.sub(" ", page.extract_text() or "").strip()
        out.append((text, _annotations(page)))
    return out


def _sentences(text: str) -> list[str]:
    """Text cut into short pieces for a readable difference."""
    return [p for p in re.split(r"(?<=[.:;!?%)]) |(?<=\d) (?=[A-Z])", text) if p]


def compare_pages(original: bytes, rebuilt: bytes) -> list[str]:
    """Each difference of page text or annotations: 'page N: expected …, found …'."""
    a, b = _page_views(original), _page_views(rebuilt)
    out: list[str] = []
    if len(a) != len(b):
        out.append(f"the report has {len(a)} page(s), the rebuild {len(b)}")
    for n, ((text_a, ann_a), (text_b, ann_b)) in enumerate(zip(a, b, strict=False), start=1):
        if text_a != text_b:
            sa, sb = _sentences(text_a), _sentences(text_b)
            sm = difflib.SequenceMatcher(a=sb, b=sa, autojunk=False)
            for tag, i1, i2, j1, j2 in sm.get_opcodes():
                if tag == "equal":
                    continue
                expected = " ".join(sb[i1:i2]) or "(nothing)"
                found = " ".join(sa[j1:j2]) or "(nothing)"
                out.append(f"page {n}: expected {_cut(expected)!r}, found {_cut(found)!r}")
        if ann_a != ann_b:
            out.append(f"page {n}: expected annotations {ann_b or 'none'}, found {ann_a or 'none'}")
    return out


def _cut(text: str, n: int = 90) -> str:
    return text if len(text) <= n else text[: n - 1] + "…"
