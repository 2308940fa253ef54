"""``build_report``: study → results → charts → HTML → PDF → one revision folder, whole or not at all.

Everything is computed in memory first.  The folder ``<output>/<study-id>/rev<N>/`` is then
written as a hidden temporary sibling, each file fsynced, and renamed into place in one step.
An existing revision folder is never overwritten unless ``replace=True``, which builds a draft
(DRAFT on every page) and swaps it in.
"""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import json
import os
import shutil
import tempfile
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..errors import ExistsError, InputError
from ..model import Ratings, Study

Progress = Callable[[str], None]


@dataclass(frozen=True)
class RenderedReport:
    """A report rendered in memory, not yet written."""

    study_id: str
    revision: int
    html: bytes
    pdf: bytes | None
    results_json: bytes
    charts: dict[str, bytes]  # file name -> SVG bytes
    results: dict[str, Any]
    templates: tuple[str, ...]
    timings: dict[str, float] = field(default_factory=dict)

    @property
    def stem(self) -> str:
        return f"{self.study_id}-rev{self.revision}"

    def files(self) -> dict[str, bytes]:
        """Every file of the revision folder, with the SHA-256 manifest of the others."""
        from ..buildrecord import MANIFEST_NAME, manifest_bytes

        out = self.side_files()
        if self.pdf is not None:
            out[f"{self.stem}.pdf"] = self.pdf
        out[MANIFEST_NAME] = manifest_bytes(out)
        return out

    def side_files(self) -> dict[str, bytes]:
        """The files written beside the PDF (their SHA-256 are in the PDF's build record)."""
        out = {f"{self.stem}.html": self.html, "results.json": self.results_json}
        out.update(self.charts)
        return out


def resolve_generated_at(value: dt.datetime | str | None) -> dt.datetime:
    """The build time: the given value, else ``SOURCE_DATE_EPOCH``, else now; UTC, whole seconds."""
    from .charts import check_source_date_epoch

    check_source_date_epoch()
    if isinstance(value, str):
        text = value.strip().replace("Z", "+00:00")
        try:
            value = dt.datetime.fromisoformat(text)
        except ValueError:
            raise InputError.single(
                "--generated-at",
                f"not an ISO 8601 time: {value!r}",
                hint="write it like 2026-11-20T09:00:00Z",
            ) from None
    if value is None:
        epoch = os.environ.get("SOURCE_DATE_EPOCH")
        if epoch and epoch.strip().isdigit():
            value = dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC)
        else:
            value = dt.datetime.now(tz=dt.UTC)
    if value.tzinfo is None:
        value = value.replace(tzinfo=dt.UTC)
    try:
        when = value.astimezone(dt.UTC).replace(microsecond=0)
    except (OverflowError, ValueError):
        when = None
    if when is None or not dt.datetime(1900, 1, 1, tzinfo=dt.UTC) <= when < dt.datetime(
        3000, 1, 1, tzinfo=dt.UTC
    ):
        raise InputError.single(
            "--generated-at",
            f"{value.isoformat()} is outside the build times accepted (years 1900 to 2999, UTC)",
            hint="write it like 2026-11-20T09:00:00Z",
        )
    return when


def results_bytes(results: Mapping[str, Any]) -> bytes:
    return (json.dumps(results, indent=2, ensure_ascii=False, allow_nan=False) + "\n").encode(
        "utf-8"
    )


def compute_results(
    study: Study, ratings: Ratings, *, progress: Progress | None = None
) -> dict[str, Any]:
    """analyse + judge (when the verdict module is installed)."""
    from ..analysis import analyse

    results = analyse(study, ratings, progress=progress)
    try:
        from ..verdict import judge
    except ImportError:  # pragma: no cover - the verdict module ships with reportgen
        return results
    results = dict(results)
    results.update(judge(study, results))
    return results


def _attachments(
    study: Study,
    ratings: Ratings | None,
    results_json: bytes,
    record: bytes | None = None,
    sources: Mapping[str, bytes] | None = None,
) -> list[Any]:
    """The PDF's attachments.  ``sources`` (role -> bytes: study, ratings, reference, key) gives
    the inputs' bytes instead of reading the files (``verify`` rebuilds from the attached copies)."""
    from ..buildrecord import RECORD_NAME
    from .pdf import PdfAttachment

    given = dict(sources or {})

    atts = []
    seen: set[str] = set()

    def add(name: str, data: bytes, desc: str, rel: str) -> None:
        base, n = name, 2
        while name in seen:
            stem, dot, ext = base.rpartition(".")
            name = f"{stem}-{n}.{ext}" if dot else f"{base}-{n}"
            n += 1
        seen.add(name)
        atts.append(PdfAttachment(name, data, desc, rel))

    add(
        study.path.name, given.get("study") or study.path.read_bytes(), "Study definition", "Source"
    )
    what = {"ratings": "Ratings file", "reference": "Reference file", "key": "Plan key file"}
    for s in ratings.sources if ratings else ():
        if s.role in what:
            add(
                s.path.name,
                given.get(s.role) or s.path.read_bytes(),
                f"{what[s.role]} as read (SHA-256 {s.sha256})",
                "Data",
            )
    add(
        "results.json",
        results_json,
        "Every figure of the report (schema reportgen-results/1)",
        "Supplement",
    )
    if record is not None:
        add(RECORD_NAME, record, "How the report was built: state, time, software", "Supplement")
    return atts


def render_report(
    study: Study,
    ratings: Ratings | None,
    results: Mapping[str, Any],
    *,
    generated_at: dt.datetime,
    draft: bool = False,
    pdf: bool = True,
    progress: Progress | None = None,
    plan: Mapping[str, Any] | None = None,
    software: list[dict[str, str]] | None = None,
    sources: Mapping[str, bytes] | None = None,
) -> RenderedReport:
    """Render charts, HTML and PDF in memory from already computed (and judged) results.

    ``plan`` is the study's plan summary (see :func:`find_plan`), shown in the design section.
    ``software`` (the versions the report prints) and ``sources`` (the inputs' bytes to attach)
    are given by ``verify`` when it rebuilds a report from its build record.
    """
    from ..buildrecord import STATE_DRAFT, STATE_KEY, STATE_RELEASE, BuildRecord, company_templates
    from .charts import report_charts
    from .context import _versions, build_context, rater_dicts, verdict_view
    from .html import check_glyphs, render_html

    say = progress or (lambda _m: None)
    timings: dict[str, float] = {}
    t0 = time.perf_counter()
    check_glyphs(_user_text(study, ratings))  # fail early and clearly, before charts are drawn
    say("charts")
    charts = report_charts(study, ratings, dict(results), verdict_view(results, rater_dicts(study)))
    if results.get("measured"):  # measured reference values: render/measured_charts.py
        from .measured_charts import measured_charts

        charts.update(measured_charts(dict(results)))
    timings["charts"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    software = list(software) if software is not None else _versions()
    ctx = build_context(
        study,
        ratings,
        results,
        generated_at=generated_at,
        draft=draft,
        charts=charts,
        plan=plan,
        software=software,
    )
    say("HTML")
    rendered = render_html(ctx, override_dir=study.templates_path)
    timings["html"] = time.perf_counter() - t0
    rjson = results_bytes(results)
    state = STATE_DRAFT if draft else STATE_RELEASE
    html_bytes = rendered.html.encode("utf-8")
    chart_files = {c.filename: c.svg for c in charts.values()}
    side = {
        f"{study.id}-rev{study.revision}.html": html_bytes,
        "results.json": rjson,
        **chart_files,
    }
    record = BuildRecord(
        state=state,
        generated_at=ctx.generated_at,
        software=software,
        plan=json.loads(json.dumps(plan)) if plan is not None else None,
        templates=company_templates(study.templates_path),
        files={n: hashlib.sha256(d).hexdigest() for n, d in sorted(side.items())},
    ).to_bytes()
    pdf_bytes = None
    if pdf:
        from .pdf import render_pdf

        say("PDF")
        t0 = time.perf_counter()
        pdf_bytes = render_pdf(
            rendered.print_html,
            generated_at=generated_at,
            attachments=_attachments(study, ratings, rjson, record, sources),
            metadata={STATE_KEY: state},
        )
        timings["pdf"] = time.perf_counter() - t0
    return RenderedReport(
        study_id=study.id,
        revision=study.revision,
        html=html_bytes,
        pdf=pdf_bytes,
        results_json=rjson,
        charts=chart_files,
        results=dict(results),
        templates=rendered.templates,
        timings=timings,
    )


def _user_text(study: Study, ratings: Ratings | None) -> str:
    """Every piece of text the study's author supplied (names, labels, ids …)."""
    parts = [
        study.id,
        study.title,
        study.purpose or "",
        study.characteristic or "",
        study.station or "",
    ]
    parts += [f"{c.code} {c.label} {c.description or ''}" for c in study.categories]
    parts += [f"{r.id} {r.name}" for r in study.raters]
    so = study.signoff
    parts += [so.prepared_by or "", so.reviewed_by or "", so.approved_by or ""]
    if ratings is not None:
        parts += list(ratings.items)
    return "\n".join(parts)


def find_plan(study: Study, *, output_dir: Path | None) -> dict[str, Any] | None:
    """The plan summary ``reportgen plan`` recorded for the study, or None (see plan.py)."""
    from ..plan import find_plan_summary

    try:
        return find_plan_summary(study, output_dir=output_dir)
    except (OSError, ValueError) as exc:  # a plan.json that cannot be read
        raise InputError.single(
            study.path,
            f"the plan summary (plan.json) of this study cannot be read: {exc}",
            hint="restore plan.json from the plan folder `reportgen plan` wrote, or remove it",
        ) from None


def revision_dir(output_dir: Path, study: Study) -> Path:
    return Path(output_dir) / study.id / f"rev{study.revision}"


def refuse_archive_target(target: Path) -> None:
    """Raise ExistsError when ``target`` (``<output>/<id>/rev<N>``) lies in a reportgen archive.

    An archive folder is written only by ``reportgen archive``: a build into it would replace an
    archived revision (``--replace``) or leave a revision folder there that the index does not know.
    """
    from ..archive import ENTRY_NAME, INDEX_NAME
    from ..outputs import archive_containing

    root = target.parent.parent
    inside = archive_containing(target)
    if inside is not None:
        root = inside
    if inside is not None or (target / ENTRY_NAME).exists() or (root / INDEX_NAME).exists():
        raise ExistsError(
            f"{root} is a reportgen archive: builds are never written into it, and archived "
            "revisions are never overwritten; build into another --output folder, then run "
            "reportgen archive"
        )


def refuse_foreign_files(target: Path) -> None:
    """Raise ExistsError when the revision folder ``target`` holds files ``build`` does not write
    (a signed copy, notes): ``--replace`` would delete them with the folder."""
    if target.is_dir() and (extra := foreign_files(target)):
        raise ExistsError(
            f"{target} holds files that build did not write ({', '.join(extra)}); --replace would "
            "delete them: move them elsewhere first, or raise study.revision"
        )


def foreign_files(target: Path) -> list[str]:
    """Files in an existing revision folder that ``build`` does not write (a signed copy, notes …)."""
    from ..buildrecord import MANIFEST_NAME

    stem = f"{target.parent.name}-{target.name}"
    ours = {f"{stem}.html", f"{stem}.pdf", "results.json", MANIFEST_NAME}
    return sorted(
        p.name
        for p in target.iterdir()
        if p.name not in ours and not (p.suffix == ".svg" and p.is_file())
    )


def write_folder(target: Path, files: Mapping[str, bytes], *, replace: bool = False) -> Path:
    """Write ``files`` into ``target`` atomically: a temporary sibling, then one rename."""
    parent = target.parent
    refuse_archive_target(target)
    parent.mkdir(parents=True, exist_ok=True)
    if target.exists() and not replace:
        raise ExistsError(
            f"{target} already exists: a built revision is never overwritten; "
            "raise study.revision in the study definition, or pass --replace for a draft"
        )
    _clean_stale(parent, target.name)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".part", dir=parent))
    try:
        for name, data in sorted(files.items()):
            path = tmp / name
            with open(path, "xb") as fh:
                fh.write(data)
                fh.flush()
                os.fsync(fh.fileno())
            os.chmod(path, 0o444)
        os.chmod(tmp, 0o755)
        _fsync_dir(tmp)
        if target.exists():  # replace=True: swap the old folder out, then delete it
            old = Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old", dir=parent))
            os.rmdir(old)
            os.rename(target, old)
            os.rename(tmp, target)
            shutil.rmtree(old, ignore_errors=True)
        else:
            try:
                os.rename(tmp, target)
            except OSError:
                if target.exists():  # another build won the race
                    raise ExistsError(
                        f"{target} already exists: raise study.revision, or pass --replace for a draft"
                    ) from None
                raise
        _fsync_dir(parent)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return target


def _clean_stale(parent: Path, name: str, *, age_s: float = 3600.0) -> None:
    """Remove temporary siblings an interrupted build left behind (older than ``age_s``)."""
    now = time.time()
    for p in parent.glob(f".{name}.*"):
        if p.suffix in (".part", ".old") and p.is_dir():
            with contextlib.suppress(OSError):
                if now - p.stat().st_mtime > age_s:
                    shutil.rmtree(p, ignore_errors=True)


def _fsync_dir(path: Path) -> None:
    with contextlib.suppress(OSError):
        fd = os.open(path, os.O_RDONLY | os.O_DIRECTORY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)


def build_report(
    study: Study,
    *,
    output_dir: Path,
    generated_at: dt.datetime | str | None = None,
    replace: bool = False,
    progress: Progress | None = None,
    pdf: bool = True,
    ratings: Ratings | None = None,
    results: Mapping[str, Any] | None = None,
) -> Path:
    """Build the report of ``study`` into ``output_dir/<id>/rev<N>/``; return that folder.

    ``ratings`` and ``results`` may be passed when already computed (they are otherwise
    loaded and computed here).  Raises ExistsError before any work when the revision exists
    and ``replace`` is false.
    """
    from ..outputs import check_output_folder
    from ..ratings import load_ratings

    check_output_folder(Path(output_dir))
    target = revision_dir(Path(output_dir), study)
    refuse_archive_target(target)
    if target.exists() and not replace:
        write_folder(target, {}, replace=False)  # raises ExistsError with the message
    refuse_foreign_files(target)
    when = resolve_generated_at(generated_at)
    say = progress or (lambda _m: None)
    if ratings is None:
        say("reading ratings")
        ratings = load_ratings(study)
    if results is None:
        results = compute_results(study, ratings, progress=progress)
    plan = find_plan(study, output_dir=Path(output_dir))
    rendered = render_report(
        study,
        ratings,
        results,
        generated_at=when,
        draft=replace,
        pdf=pdf,
        progress=progress,
        plan=plan,
    )
    say("writing")
    refuse_foreign_files(target)  # again: a file may have been put there while rendering
    return write_folder(target, rendered.files(), replace=replace)
