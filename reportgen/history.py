"""Requalification history: the archived studies of a characteristic, figure by figure, over time.

Built from the archive index only.  Studies are grouped into *series* by characteristic and
inspection station; within a series they are ordered by study date, then study id and revision.
Each figure is shown with its interval, so that a change between two studies is read against
the noise of each: when the two intervals do not overlap the change is larger than the noise
of either study; when they overlap it may be noise.  (Non-overlap of two intervals is a
conservative check of a difference: Schenker N. & Gentleman J. F. (2001), "On judging the
significance of differences by examining the overlap between confidence intervals",
The American Statistician 55(3), 182-186.)

A point where the set of items differs from the previous point of the series is marked: a
change of figures there may come from harder or easier items, not from the raters.
Inspectors are matched across studies by name, as in the register.

matplotlib, Jinja2 and WeasyPrint are imported inside the functions that need them.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .archive import PANEL_FIGURES, RATER_FIGURES, ArchiveEntry, list_entries
from .errors import InputError
from .rounds import point_label

#: headings of the figures, in plain words
MEASURE_LABELS: dict[str, str] = {
    "reproducibility.agreement": "Agreement among raters",
    "reproducibility.fleiss_kappa": "Fleiss' kappa among raters",
    "reproducibility.krippendorff_alpha": "Krippendorff's alpha among raters",
    "reproducibility.gwet_ac1": "Gwet's AC1 among raters",
    "reproducibility.kendall_w": "Kendall's W among raters",
    "panel_accuracy.agreement": "Panel accuracy",
    "panel_accuracy.effectiveness": "Panel effectiveness",
    "panel_accuracy.miss_rate": "Panel miss rate",
    "panel_accuracy.false_alarm_rate": "Panel false alarm rate",
    "repeatability.agreement": "Repeatability (agreement rate)",
    "repeatability.fleiss_kappa": "Repeatability (Fleiss' kappa)",
    "accuracy.agreement": "Accuracy (agreement rate)",
    "accuracy.effectiveness": "Effectiveness",
    "accuracy.cohen_kappa": "Cohen's kappa against the reference",
    "accuracy.weighted_kappa": "Weighted kappa against the reference",
    "accuracy.miss_rate": "Miss rate",
    "accuracy.false_alarm_rate": "False alarm rate",
}
#: the panel figures drawn in the trend chart (at most four, first found first)
CHART_PANEL = (
    "reproducibility.fleiss_kappa",
    "reproducibility.krippendorff_alpha",
    "reproducibility.agreement",
    "panel_accuracy.agreement",
    "panel_accuracy.effectiveness",
    "panel_accuracy.miss_rate",
)
#: the per-inspector figures drawn in the inspector chart
CHART_RATER = ("accuracy.agreement", "repeatability.agreement", "accuracy.miss_rate")


@dataclass(frozen=True)
class TrendPoint:
    """One archived study revision in a series."""

    entry: ArchiveEntry
    label: str  # "SEAL-CHECK rev2"
    superseded_by: int | None  # a later revision of the same study, if archived
    item_set_changed: bool  # the items differ from the previous point of the series
    items_added: int
    items_removed: int

    @property
    def date(self) -> str:
        return self.entry.study_date or self.entry.archived_at[:10]


@dataclass(frozen=True)
class Shift:
    """How a figure moved from one point to the next."""

    measure: str
    inspector: str | None
    before: str  # point labels
    after: str
    change: float
    overlap: bool  # the two intervals overlap: the change may be noise
    item_set_changed: bool

    @property
    def reading(self) -> str:
        who = f"{self.inspector}: " if self.inspector else ""
        direction = "up" if self.change > 0 else "down" if self.change < 0 else "unchanged"
        label = MEASURE_LABELS.get(self.measure, self.measure)
        if self.overlap:
            verdict = "the intervals overlap, so this may be noise"
        else:
            verdict = (
                "the intervals do not overlap: the change is larger than the noise of either study"
            )
        tail = "; the item set changed here" if self.item_set_changed else ""
        return f"{who}{label} {direction} by {abs(self.change):.3f} from {self.before} to {self.after}: {verdict}{tail}."


@dataclass(frozen=True)
class TrendSeries:
    """The archived studies of one characteristic at one station, oldest first."""

    characteristic: str
    station: str | None
    points: tuple[TrendPoint, ...]
    panel_measures: tuple[str, ...]
    rater_measures: tuple[str, ...]
    inspectors: tuple[str, ...]
    shifts: tuple[Shift, ...] = field(default=())

    @property
    def title(self) -> str:
        return self.characteristic + (f" · {self.station}" if self.station else "")

    def panel(self, measure: str) -> list[dict[str, Any] | None]:
        return [p.entry.figures.get("panel", {}).get(measure) for p in self.points]

    def inspector(self, name: str, measure: str) -> list[dict[str, Any] | None]:
        out = []
        for p in self.points:
            rid = _rater_id(p.entry, name)
            out.append(
                None if rid is None else p.entry.figures.get("raters", {}).get(rid, {}).get(measure)
            )
        return out


def _names(entry: ArchiveEntry) -> dict[str, str]:
    names = dict(entry.figures.get("names") or {})
    for rid, c in entry.certification.items():
        if isinstance(c, dict) and c.get("name"):
            names.setdefault(rid, str(c["name"]))
    for rid in entry.figures.get("raters", {}):
        names.setdefault(rid, rid)
    return names


def _norm(text: str) -> str:
    return " ".join(text.split()).casefold()


def _rater_id(entry: ArchiveEntry, name: str) -> str | None:
    for rid, n in _names(entry).items():
        if _norm(n) == _norm(name):
            return rid
    return None


def _overlap(a: dict[str, Any], b: dict[str, Any]) -> bool | None:
    lo_a, hi_a, lo_b, hi_b = a.get("ci_low"), a.get("ci_high"), b.get("ci_low"), b.get("ci_high")
    if None in (lo_a, hi_a, lo_b, hi_b):
        return None
    return not (hi_a < lo_b or hi_b < lo_a)


def _shifts(series: TrendSeries) -> tuple[Shift, ...]:
    out: list[Shift] = []

    def walk(measure: str, inspector: str | None, values: list[dict[str, Any] | None]) -> None:
        prev: tuple[int, dict[str, Any]] | None = None
        for i, rec in enumerate(values):
            if rec is None or rec.get("estimate") is None:
                continue
            if prev is not None:
                j, before = prev
                overlap = _overlap(before, rec)
                if overlap is not None:
                    out.append(
                        Shift(
                            measure=measure,
                            inspector=inspector,
                            before=series.points[j].label,
                            after=series.points[i].label,
                            change=float(rec["estimate"]) - float(before["estimate"]),
                            overlap=overlap,
                            item_set_changed=any(
                                p.item_set_changed for p in series.points[j + 1 : i + 1]
                            ),
                        )
                    )
            prev = (i, rec)

    for m in series.panel_measures:
        walk(m, None, series.panel(m))
    for name in series.inspectors:
        for m in series.rater_measures:
            walk(m, name, series.inspector(name, m))
    return tuple(out)


def build_history(entries: Sequence[ArchiveEntry]) -> list[TrendSeries]:
    """Group archived revisions into series and mark item-set changes and superseded revisions."""
    latest_rev: dict[str, list[int]] = {}
    for e in entries:
        latest_rev.setdefault(e.study_id, []).append(e.revision)
    groups: dict[tuple[str, str], list[ArchiveEntry]] = {}
    display: dict[tuple[str, str], tuple[str, str | None]] = {}
    for e in entries:
        characteristic = e.characteristic or f"study {e.study_id}"
        k = (_norm(characteristic), _norm(e.station or ""))
        groups.setdefault(k, []).append(e)
        display.setdefault(k, (characteristic, e.station))
    series: list[TrendSeries] = []
    for k in sorted(groups):
        es = sorted(
            groups[k],
            key=lambda e: (
                e.study_date or e.archived_at[:10],
                e.study_id,
                e.revision,
                e.archived_at,
            ),
        )
        points: list[TrendPoint] = []
        for i, e in enumerate(es):
            later = sorted(r for r in latest_rev[e.study_id] if r > e.revision)
            if i == 0:
                changed, added, removed = False, 0, 0
            else:
                prev = set(es[i - 1].items)
                cur = set(e.items)
                changed = es[i - 1].item_set_sha256 != e.item_set_sha256
                added, removed = len(cur - prev), len(prev - cur)
            points.append(
                TrendPoint(
                    entry=e,
                    label=point_label(e.study_id, e.revision),
                    superseded_by=later[0] if later else None,
                    item_set_changed=changed,
                    items_added=added,
                    items_removed=removed,
                )
            )
        panel = tuple(m for m in PANEL_FIGURES if any(m in e.figures.get("panel", {}) for e in es))
        rater = tuple(
            m
            for m in RATER_FIGURES
            if any(m in f for e in es for f in e.figures.get("raters", {}).values())
        )
        inspectors: dict[str, str] = {}
        for e in es:
            for name in _names(e).values():
                inspectors.setdefault(_norm(name), name)
        s = TrendSeries(
            characteristic=display[k][0],
            station=display[k][1],
            points=tuple(points),
            panel_measures=panel,
            rater_measures=rater,
            inspectors=tuple(sorted(inspectors.values(), key=_norm)),
        )
        series.append(TrendSeries(**{**s.__dict__, "shifts": _shifts(s)}))
    return series


def load_history(
    archive_dir: str | Path, *, characteristic: str | None = None, station: str | None = None
) -> tuple[list[ArchiveEntry], list[TrendSeries]]:
    entries = list_entries(archive_dir, characteristic=characteristic, station=station)
    if not entries:
        what = " and ".join(
            f"{k} {v!r}" for k, v in (("characteristic", characteristic), ("station", station)) if v
        )
        raise InputError.single(
            archive_dir,
            "the archive holds no studies" + (f" for {what}" if what else ""),
            hint="archive built revisions with `reportgen archive`, or check the spelling of the filter",
        )
    return entries, build_history(entries)


# --------------------------------------------------------------------------- text


def format_text(entries: Sequence[ArchiveEntry], series: Sequence[TrendSeries]) -> str:
    """A terminal summary: every series with its main figure per point, then the shifts."""
    from .render.filters import fmt_ci, fmt_estimate

    lines: list[str] = []
    for s in series:
        lines.append(s.title)
        main = next((m for m in CHART_PANEL if m in s.panel_measures), None)
        for p, rec in zip(s.points, s.panel(main) if main else [None] * len(s.points), strict=True):
            fig = (
                f"{MEASURE_LABELS.get(main or '', main)} {fmt_estimate(rec)} ({fmt_ci(rec)})"
                if rec
                else ""
            )
            marks = []
            if p.item_set_changed:
                marks.append(f"new item set: +{p.items_added} / -{p.items_removed} items")
            if p.superseded_by:
                marks.append(f"superseded by rev{p.superseded_by}")
            if not p.entry.study_date:
                marks.append("no study date: the archive date is shown")
            verdict = p.entry.verdict or "no verdict"
            lines.append(
                f"  {p.date}  {p.label:<24} {verdict:<8} {fig}"
                + (f"  [{'; '.join(marks)}]" if marks else "")
            )
        for sh in s.shifts:
            if not sh.overlap and sh.inspector is None:
                lines.append(f"  * {sh.reading}")
        lines.append("")
    lines.append(f"{len(entries)} archived revision(s) in {len(series)} series.")
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- charts


def _x_labels(s: TrendSeries) -> list[str]:
    return [f"{p.label}\n{p.date}" for p in s.points]


def _mark_item_changes(ax: Any, s: TrendSeries, colour: str) -> None:
    for i, p in enumerate(s.points):
        if p.item_set_changed:
            ax.axvline(i - 0.5, color=colour, linestyle=(0, (4, 2)), linewidth=1.0)
            ax.annotate(
                "new item set",
                xy=(i - 0.5, 1.0),
                xycoords=("data", "axes fraction"),
                xytext=(2, -2),
                textcoords="offset points",
                fontsize=7,
                color=colour,
                va="top",
            )


def _errorbars(
    ax: Any,
    xs: list[float],
    recs: list[dict[str, Any] | None],
    *,
    colour: str,
    marker: str,
    label: str | None,
    hollow: list[bool],
) -> None:
    pts = [
        (x, r, h)
        for x, r, h in zip(xs, recs, hollow, strict=True)
        if r and r.get("estimate") is not None
    ]
    if not pts:
        return
    x = [p[0] for p in pts]
    y = [float(p[1]["estimate"]) for p in pts]
    ax.plot(x, y, color=colour, linewidth=0.8, alpha=0.6)
    for (xi, r, h), yi in zip(pts, y, strict=True):
        lo, hi = r.get("ci_low"), r.get("ci_high")
        if lo is not None and hi is not None:
            ax.errorbar(
                [xi],
                [yi],
                yerr=[[yi - float(lo)], [float(hi) - yi]],
                fmt="none",
                ecolor=colour,
                elinewidth=1.2,
                capsize=3,
            )
        ax.plot(
            [xi],
            [yi],
            marker=marker,
            markersize=5.5,
            color=colour,
            markerfacecolor="white" if h else colour,
            linestyle="none",
        )
    if label:
        ax.plot([], [], marker=marker, color=colour, linestyle="-", linewidth=0.8, label=label)


def panel_chart(s: TrendSeries, index: int) -> Any:
    """Panel figures across the series, with intervals; returns a render ``Chart``."""
    from .render.charts import INK, OCHRE, SLATE, Chart, _plt, _style, _svg, _tight

    measures = [m for m in CHART_PANEL if m in s.panel_measures][:4]
    plt = _plt()
    _style(plt, f"history-panel-{index}")
    cols = 2 if len(measures) > 2 else 1
    rows = max(1, -(-len(measures) // cols))
    fig, axes = plt.subplots(
        rows, cols, figsize=(7.2, 2.1 * rows + 0.7), sharex=True, squeeze=False
    )
    xs = [float(i) for i in range(len(s.points))]
    hollow = [p.superseded_by is not None for p in s.points]
    flat = list(axes.flat)
    for ax, m in zip(flat, measures, strict=False):
        _errorbars(ax, xs, s.panel(m), colour=INK, marker="o", label=None, hollow=hollow)
        ax.set_title(MEASURE_LABELS.get(m, m), fontsize=8.5, loc="left", color=INK)
        ax.grid(axis="y", color=SLATE, alpha=0.15, linewidth=0.6)
        _mark_item_changes(ax, s, OCHRE)
    for ax in flat[len(measures) :]:
        ax.set_visible(False)
    for ax in axes[-1, :]:
        ax.set_xticks(xs)
        ax.set_xticklabels(_x_labels(s), fontsize=6.5 if cols == 2 else 7)
        ax.set_xlim(-0.6, len(xs) - 0.4)
        ax.tick_params(axis="x", labelbottom=True)
    _tight(fig)
    names = ", ".join(MEASURE_LABELS.get(m, m) for m in measures)
    return Chart(
        name=f"history-panel-{index}",
        svg=_svg(fig),
        title=f"Panel figures across the studies of {s.title}",
        alt=f"Estimates with interval bars of {names} for {len(s.points)} archived studies, oldest first.",
        note="Bars are the intervals; hollow markers are revisions superseded by a later one; a dashed line "
        "marks a change of the item set.",
    )


def inspector_chart(s: TrendSeries, index: int) -> Any | None:
    from .render.charts import INK, OCHRE, SLATE, Chart, _plt, _style, _svg, _tight

    measures = [m for m in CHART_RATER if m in s.rater_measures][:2]
    if not measures or not s.inspectors:
        return None
    plt = _plt()
    _style(plt, f"history-inspectors-{index}")
    fig, axes = plt.subplots(
        len(measures), 1, figsize=(7.2, 2.2 * len(measures) + 0.8), sharex=True, squeeze=False
    )
    colours = (INK, SLATE, OCHRE)
    markers = ("o", "s", "^", "D", "v", "P", "X", "*")
    k = len(s.inspectors)
    width = min(0.6, 0.12 * k)
    hollow = [p.superseded_by is not None for p in s.points]
    for ax, m in zip(axes[:, 0], measures, strict=False):
        for j, name in enumerate(s.inspectors):
            dodge = (j - (k - 1) / 2) * (width / max(k - 1, 1)) if k > 1 else 0.0
            xs = [i + dodge for i in range(len(s.points))]
            _errorbars(
                ax,
                xs,
                s.inspector(name, m),
                colour=colours[j % 3],
                marker=markers[j % len(markers)],
                label=name if ax is axes[0, 0] else None,
                hollow=hollow,
            )
        ax.set_title(MEASURE_LABELS.get(m, m), fontsize=8.5, loc="left", color=INK)
        ax.grid(axis="y", color=SLATE, alpha=0.15, linewidth=0.6)
        _mark_item_changes(ax, s, OCHRE)
    axes[0, 0].legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.0))
    ax = axes[-1, 0]
    ax.set_xticks(range(len(s.points)))
    ax.set_xticklabels(_x_labels(s), fontsize=7)
    ax.set_xlim(-0.6, len(s.points) - 0.4)
    _tight(fig)
    return Chart(
        name=f"history-inspectors-{index}",
        svg=_svg(fig),
        title=f"Inspector figures across the studies of {s.title}",
        alt=f"Per-inspector estimates with interval bars for {k} inspectors across {len(s.points)} studies.",
        note="Each inspector has a marker shape of their own; bars are the intervals.",
    )


# --------------------------------------------------------------------------- HTML and PDF


def render_history_html(
    entries: Sequence[ArchiveEntry],
    series: Sequence[TrendSeries],
    *,
    generated_at: dt.datetime,
    filters: dict[str, str | None] | None = None,
) -> str:
    from . import __version__
    from .render.environment import make_environment

    env = make_environment()
    blocks = []
    for i, s in enumerate(series, start=1):
        rows = []
        for p in s.points:
            rows.append(
                {
                    "label": p.label,
                    "date": p.date if p.entry.study_date else f"{p.date} (archived; no study date)",
                    "verdict": p.entry.verdict,
                    "items": len(p.entry.items),
                    "item_note": (
                        f"new item set (+{p.items_added} / −{p.items_removed})"
                        if p.item_set_changed
                        else ""
                    ),
                    "superseded_by": p.superseded_by,
                    "panel": [p.entry.figures.get("panel", {}).get(m) for m in s.panel_measures],
                }
            )
        inspector_rows = []
        for name in s.inspectors:
            for m in s.rater_measures:
                vals = s.inspector(name, m)
                if any(v is not None for v in vals):
                    inspector_rows.append(
                        {"inspector": name, "measure": MEASURE_LABELS.get(m, m), "values": vals}
                    )
        blocks.append(
            {
                "title": s.title,
                "panel_chart": panel_chart(s, i) if s.panel_measures else None,
                "inspector_chart": inspector_chart(s, i),
                "panel_labels": [MEASURE_LABELS.get(m, m) for m in s.panel_measures],
                "rows": rows,
                "points": [p.label for p in s.points],
                "inspector_rows": inspector_rows,
                "shifts": [sh.reading for sh in s.shifts if not sh.overlap],
                "noise": sum(sh.overlap for sh in s.shifts),
            }
        )
    superseded = {
        (e.study_id, e.revision): max(
            (x.revision for x in entries if x.study_id == e.study_id and x.revision > e.revision),
            default=None,
        )
        for e in entries
    }
    table = [
        {
            "study_id": e.study_id,
            "revision": e.revision,
            "title": e.title,
            "date": e.study_date,
            "characteristic": e.characteristic,
            "station": e.station,
            "items": len(e.items),
            "verdict": e.verdict,
            "superseded_by": superseded[(e.study_id, e.revision)],
            "archived_at": e.archived_at,
            "software_version": e.software_version,
        }
        for e in entries
    ]
    return env.get_template("history.html").render(
        title="Requalification history",
        generated_at=generated_at.astimezone(dt.UTC).strftime("%Y-%m-%dT%H:%M:%SZ"),
        version=__version__,
        filters={k: v for k, v in (filters or {}).items() if v},
        series=blocks,
        table=table,
        confidence=next(
            (
                e.figures.get("confidence_level")
                for e in entries
                if e.figures.get("confidence_level")
            ),
            None,
        ),
    )


def render_history_pdf(html: str, *, generated_at: dt.datetime) -> bytes:
    from .render.pdf import render_pdf

    return render_pdf(html, generated_at=generated_at)
