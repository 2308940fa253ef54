"""The report's charts: matplotlib (Agg) figures returned as SVG bytes, embedded as ``data:`` URIs.

Palette (our own; chosen so that every pair differs in lightness, which survives grayscale
printing, and so that no meaning rests on a red/green contrast):

=============  =========  ==================================================================
name           hex        used for
=============  =========  ==================================================================
ink            #1d2733    text, axes, estimate markers
slate          #3f6e9a    interval bars, second series
ochre          #c98a1b    reference markers, highlighted series
mist           #dfe7ef    "meets" band of an acceptance criterion
sand           #f3ead7    "marginal" band (also hatched with horizontal lines)
paper          #ffffff    "short" band (left white, hatched with fine lines)
heat ramp      #f7f9fb → #16324f   counts in the confusion maps (single hue, lightness only)
=============  =========  ==================================================================

Category colours in the item map are a lightness ramp for ordinal scales (best = lightest) and
a set of six fills for nominal scales; in both, neighbouring fills differ by at least
``MIN_LIGHTNESS_STEP`` in CIE L* so that they stay apart on a greyscale print, and a missing
rating is white with its own cross-hatch. Text is at least ``MIN_TEXT_PT`` at print size: a chart
is drawn no wider than ``PRINT_WIDTH_IN`` (the text width of an A4 page), so it is never shrunk.

Determinism: ``svg.hashsalt`` is set per chart, ``metadata={"Date": None}``, text is drawn as
paths (no dependence on installed fonts), and dense marks (the item map) are rasterised.
matplotlib is imported only inside :func:`_plt`.
"""

from __future__ import annotations

import base64
import io
import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

INK = "#1d2733"
SLATE = "#3f6e9a"
OCHRE = "#c98a1b"
MIST = "#dfe7ef"
SAND = "#f3ead7"
PAPER = "#ffffff"
HEAT_LOW = "#f7f9fb"
HEAT_HIGH = "#16324f"
#: nominal category fills, in order; CIE L* 94, 78, 61, 45, 30, 14 (each pair >= 15 apart)
NOMINAL_FILLS = ("#e9eff4", "#afc4d7", "#c5871a", "#3f6e9a", "#5e4110", "#1b2430")
#: a missing rating in the item map: white cells under a grey cross-hatch (a pattern of its own)
MISSING_HATCH = "xxxx"
MISSING_EDGE = "#8a939c"
#: series of the steps-apart bars: fills, and hatches where two fills are close in lightness
STEPS_FILLS = (SLATE, OCHRE, MIST, INK, SAND, "#9fb8cf")
STEPS_HATCHES = ("", "//", "--", "", "xx", "\\\\")
#: smallest difference in CIE L* between two legend entries told apart by fill alone
MIN_LIGHTNESS_STEP = 15.0
#: smallest chart text at print size, in points
MIN_TEXT_PT = 7.0
#: widest chart, in inches: the text width of an A4 page with the report's 15 mm side margins
PRINT_WIDTH_IN = 180 / 25.4

PALETTE = {
    "ink": INK,
    "slate": SLATE,
    "ochre": OCHRE,
    "mist": MIST,
    "sand": SAND,
    "paper": PAPER,
    "heat_low": HEAT_LOW,
    "heat_high": HEAT_HIGH,
}


@dataclass(frozen=True)
class Chart:
    """One rendered chart."""

    name: str  #: file stem, e.g. "rater-figures"
    svg: bytes  #: the SVG document
    title: str  #: caption title shown under the figure
    alt: str  #: text alternative for screen readers
    note: str = ""  #: one-line reading of the chart

    @property
    def data_uri(self) -> str:
        return "data:image/svg+xml;base64," + base64.b64encode(self.svg).decode("ascii")

    @property
    def filename(self) -> str:
        return f"{self.name}.svg"


def _plt() -> Any:
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    from .svgtext import install

    install()  # each label one <path>, not one <use> per glyph (WeasyPrint draws them faster)
    return plt


def check_source_date_epoch() -> None:
    """``SOURCE_DATE_EPOCH``, when set, must be whole seconds: matplotlib reads it too, and
    stops with a bare ValueError otherwise."""
    value = os.environ.get("SOURCE_DATE_EPOCH")
    if value is not None and value.strip() and not value.strip().isdigit():
        from ..errors import InputError

        raise InputError.single(
            "SOURCE_DATE_EPOCH",
            f"must be a whole number of seconds since 1970-01-01 UTC, got {value!r}",
            hint="unset it, or set it to whole seconds such as 1795165200 (2026-11-20T09:00:00Z)",
        )


def _style(plt: Any, name: str) -> None:
    check_source_date_epoch()
    rc = plt.rcParams
    rc["svg.hashsalt"] = f"reportgen-{name}"
    rc["svg.fonttype"] = "path"
    _register_fonts()
    rc["font.family"] = ["DejaVu Sans", "Droid Sans Fallback"]  # shipped; CJK falls back per glyph
    rc["font.size"] = 8.5
    rc["axes.edgecolor"] = INK
    rc["axes.labelcolor"] = INK
    rc["text.color"] = INK
    rc["xtick.color"] = INK
    rc["ytick.color"] = INK
    rc["axes.spines.top"] = False
    rc["axes.spines.right"] = False
    rc["hatch.linewidth"] = 0.6
    rc["path.simplify"] = True
    import logging

    logging.getLogger("matplotlib.font_manager").setLevel(logging.ERROR)


_FONTS_DONE = False


def _register_fonts() -> None:
    """Make the shipped fonts known to matplotlib (once per process)."""
    global _FONTS_DONE
    if _FONTS_DONE:
        return
    from matplotlib import font_manager

    from .environment import builtin_template_dir

    shipped: set[str] = set()
    for name in ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf", "DroidSansFallback.ttf"):
        path = builtin_template_dir() / "fonts" / name
        if path.is_file():
            font_manager.fontManager.addfont(str(path))
            shipped.add(os.path.realpath(path))
    # A font of the same family installed on the machine (Debian's DroidSansFallbackFull.ttf
    # lacks Hangul; matplotlib's own DejaVu may be another version) must not be chosen instead:
    # charts would then depend on the machine and miss glyphs the shipped font has.
    fm = font_manager.fontManager
    families = {e.name for e in fm.ttflist if os.path.realpath(e.fname) in shipped}
    fm.ttflist = [
        e for e in fm.ttflist if e.name not in families or os.path.realpath(e.fname) in shipped
    ]
    font_manager.FontManager._findfont_cached.cache_clear()  # type: ignore[attr-defined]
    font_manager._get_font.cache_clear()  # type: ignore[attr-defined]
    _FONTS_DONE = True


def lightness(colour: Sequence[float] | str) -> float:
    """CIE L* (0 black … 100 white) of an sRGB colour given as hex or as 0–1 floats."""
    if isinstance(colour, str):
        h = colour.lstrip("#")
        rgb = [int(h[i : i + 2], 16) / 255 for i in (0, 2, 4)]
    else:
        rgb = [float(c) for c in colour[:3]]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in rgb]
    y = 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]
    return 116 * (y ** (1 / 3) if y > (6 / 29) ** 3 else y / (3 * (6 / 29) ** 2) + 4 / 29) - 16


def _mix(t: float) -> tuple[float, float, float]:
    a, b = HEAT_LOW.lstrip("#"), HEAT_HIGH.lstrip("#")
    lo = [int(a[i : i + 2], 16) / 255 for i in (0, 2, 4)]
    hi = [int(b[i : i + 2], 16) / 255 for i in (0, 2, 4)]
    r, g, bl = (x + (y - x) * t for x, y in zip(lo, hi, strict=True))
    return (r, g, bl)


def ordinal_fills(k: int) -> list[tuple[float, float, float]]:
    """``k`` fills along the heat ramp, evenly spaced in L* from L* 96 (best) to the darkest
    end, so that neighbours differ by the same lightness step (>= 15 L* up to six categories)."""
    top, bottom = 96.0, lightness(HEAT_HIGH)
    targets = [top] if k == 1 else [top + (bottom - top) * i / (k - 1) for i in range(k)]
    out = []
    for target in targets:
        lo, hi = 0.0, 1.0  # lightness falls as t grows
        for _ in range(40):
            mid = (lo + hi) / 2
            if lightness(_mix(mid)) > target:
                lo = mid
            else:
                hi = mid
        out.append(_mix((lo + hi) / 2))
    return out


def category_fills(k: int, *, ordinal: bool) -> list[tuple[float, float, float]]:
    """The item map's fill for each of ``k`` categories (ordinal ramp or nominal set)."""
    if ordinal:
        return ordinal_fills(k)
    from matplotlib.colors import to_rgb

    return [tuple(to_rgb(NOMINAL_FILLS[i % len(NOMINAL_FILLS)])) for i in range(k)]  # type: ignore[misc]


def _tight(fig: Any, **kw: Any) -> None:
    """``fig.tight_layout`` without its warning when long names leave it no room (the figure is
    then kept as laid out; the warning would only reach the user's terminal)."""
    import warnings

    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="Tight layout not applied", category=UserWarning)
        fig.tight_layout(**kw)


def _svg(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", metadata={"Date": None}, bbox_inches="tight", pad_inches=0.05)
    import matplotlib.pyplot as plt

    plt.close(fig)
    from .svgtext import flatten_groups

    return flatten_groups(buf.getvalue())


def _short(text: str, limit: int = 28) -> str:
    """Chart labels: long user text is cut with an ellipsis (tables show it in full)."""
    text = " ".join(str(text).split())
    text = text if len(text) <= limit else text[: limit - 1] + "…"
    return text.replace("$", r"\$")  # no mathtext from user text


@dataclass(frozen=True)
class Band:
    """An acceptance criterion drawn as shaded bands: pass and marginal levels, direction."""

    pass_level: float
    marginal_level: float | None
    better: str = "higher"  # "higher" | "lower"


@dataclass(frozen=True)
class Point:
    label: str
    estimate: float | None
    low: float | None
    high: float | None


def _draw_bands(ax: Any, band: Band | None, lo: float, hi: float) -> None:
    if band is None:
        return
    p, m = band.pass_level, band.marginal_level
    if band.better == "lower":
        ax.axvspan(lo, p, color=MIST, lw=0, zorder=0)
        if m is not None:
            ax.axvspan(p, m, facecolor=SAND, edgecolor="#b9a67a", hatch="---", lw=0, zorder=0)
            ax.axvspan(m, hi, facecolor=PAPER, edgecolor="#c4c9cf", hatch="///", lw=0, zorder=0)
        else:
            ax.axvspan(p, hi, facecolor=PAPER, edgecolor="#c4c9cf", hatch="///", lw=0, zorder=0)
    else:
        ax.axvspan(p, hi, color=MIST, lw=0, zorder=0)
        if m is not None:
            ax.axvspan(m, p, facecolor=SAND, edgecolor="#b9a67a", hatch="---", lw=0, zorder=0)
            ax.axvspan(lo, m, facecolor=PAPER, edgecolor="#c4c9cf", hatch="///", lw=0, zorder=0)
        else:
            ax.axvspan(lo, p, facecolor=PAPER, edgecolor="#c4c9cf", hatch="///", lw=0, zorder=0)
    for level in (p, m):
        if level is not None:
            ax.axvline(level, color=INK, lw=0.6, ls=(0, (2, 2)), zorder=1)


def interval_panels(
    name: str,
    title: str,
    panels: Sequence[tuple[str, Sequence[Point], Band | None, tuple[float, float]]],
    *,
    alt: str,
    note: str = "",
) -> Chart:
    """Side-by-side panels, each a list of estimates with interval bars against shaded bands.

    ``panels`` holds (panel title, points, acceptance band or None, x range).
    """
    plt = _plt()
    _style(plt, name)
    n_rows = max((len(p[1]) for p in panels), default=1)
    # at most two panels side by side, so that the chart is printed at its own size
    cols = max(1, min(len(panels), 2))
    grid_rows = (len(panels) + cols - 1) // cols
    fig, axes = plt.subplots(
        grid_rows,
        cols,
        figsize=(max(3.0, 2.9 * cols + 0.6), (0.42 * n_rows + 0.9) * grid_rows),
        squeeze=False,
    )
    for idx in range(len(panels), grid_rows * cols):
        axes[idx // cols][idx % cols].axis("off")
    for idx, (ptitle, points, band, (lo, hi)) in enumerate(panels):
        ax = axes[idx // cols][idx % cols]
        k = idx % cols
        _draw_bands(ax, band, lo, hi)
        ys = list(range(len(points)))[::-1]
        for y, pt in zip(ys, points, strict=True):
            if pt.low is not None and pt.high is not None:
                ax.hlines(y, pt.low, pt.high, color=SLATE, lw=2.2, zorder=2)
                ax.vlines([pt.low, pt.high], y - 0.12, y + 0.12, color=SLATE, lw=1.0, zorder=2)
            if pt.estimate is not None:
                ax.plot(
                    [pt.estimate], [y], marker="D", ms=5, color=INK, mec=PAPER, mew=0.7, zorder=3
                )
            else:
                ax.text(
                    (lo + hi) / 2,
                    y,
                    "undefined",
                    ha="center",
                    va="center",
                    fontsize=7.5,
                    style="italic",
                )
        ax.set_xlim(lo, hi)
        ax.set_ylim(-0.6, len(points) - 0.4)
        ax.set_yticks(ys)
        ax.set_yticklabels([_short(p.label, 18) for p in points] if k == 0 else [""] * len(points))
        if k > 0:
            ax.tick_params(axis="y", length=0)
        ax.set_title(_short(ptitle, 34), fontsize=8.5, loc="left")
        ax.grid(axis="x", color="#c4c9cf", lw=0.4, zorder=0)
        ax.set_axisbelow(True)
    _tight(fig, w_pad=0.8)
    return Chart(name, _svg(fig), title, alt, note)


def confusion_maps(
    name: str,
    title: str,
    maps: Sequence[tuple[str, Sequence[Sequence[int]]]],
    labels: Sequence[str],
    *,
    alt: str,
    note: str = "",
) -> Chart:
    """One heat map per rater: rows = reference category, columns = the rater's rating."""
    import numpy as np
    from matplotlib.colors import LinearSegmentedColormap

    plt = _plt()
    _style(plt, name)
    cmap = LinearSegmentedColormap.from_list("reportgen-heat", [HEAT_LOW, HEAT_HIGH])
    k = len(labels)
    n = len(maps)
    cols = min(n, 3 if k <= 4 else 2)
    rows = (n + cols - 1) // cols
    side = 0.32 * k + 0.9
    fig, axes = plt.subplots(
        rows, cols, figsize=(side * cols + 0.4, side * rows + 0.2), squeeze=False
    )
    short = [_short(lbl, 18) for lbl in labels]
    for idx in range(rows * cols):
        ax = axes[idx // cols][idx % cols]
        if idx >= n:
            ax.axis("off")
            continue
        rater, matrix = maps[idx]
        m = np.asarray(matrix, dtype=float)
        vmax = max(float(m.max()) if m.size else 1.0, 1.0)
        ax.imshow(m, cmap=cmap, vmin=0, vmax=vmax, aspect="equal")
        for i in range(k):
            for j in range(k):
                v = int(m[i, j])
                ax.text(
                    j,
                    i,
                    str(v),
                    ha="center",
                    va="center",
                    fontsize=7.5,
                    color=PAPER if v > 0.55 * vmax else INK,
                    fontweight="bold" if i == j else "normal",
                )
        ax.set_xticks(range(k))
        ax.set_yticks(range(k))
        ax.set_xticklabels(short, rotation=45, ha="right", fontsize=7.5)
        ax.set_yticklabels(short if idx % cols == 0 else [""] * k, fontsize=7.5)
        ax.set_title(_short(rater, 24), fontsize=8.5, loc="left")
        ax.spines[:].set_visible(False)
        ax.set_xticks(np.arange(-0.5, k, 1), minor=True)
        ax.set_yticks(np.arange(-0.5, k, 1), minor=True)
        ax.grid(which="minor", color=PAPER, lw=1.2)
        ax.tick_params(which="minor", length=0)
        if idx % cols == 0:
            ax.set_ylabel("reference")
        if idx // cols == rows - 1:
            ax.set_xlabel("rated as")
    _tight(fig)
    return Chart(name, _svg(fig), title, alt, note)


def steps_apart(
    name: str,
    title: str,
    steps: Sequence[int],
    series: Sequence[tuple[str, Sequence[int]]],
    *,
    alt: str,
    note: str = "",
) -> Chart:
    """Grouped bars: how many ratings were 0, ±1, ±2 … categories away from the reference."""
    import numpy as np

    plt = _plt()
    _style(plt, name)
    fills, hatches = STEPS_FILLS, STEPS_HATCHES
    n = max(len(series), 1)
    width = 0.8 / n
    fig, ax = plt.subplots(figsize=(6.4, 2.6))
    x = np.arange(len(steps))
    for s, (label, counts) in enumerate(series):
        total = max(sum(counts), 1)
        share = [c / total for c in counts]
        ax.bar(
            x - 0.4 + width * (s + 0.5),
            share,
            width,
            label=_short(label, 22),
            color=fills[s % len(fills)],
            hatch=hatches[s % len(hatches)],
            edgecolor=INK,
            lw=0.5,
        )
    ax.set_xticks(x)
    ax.set_xticklabels([("+" if v > 0 else "") + str(v).replace("-", "−") for v in steps])
    ax.set_xlabel("steps apart from the reference (− better than the reference, + worse)")
    ax.set_ylabel("share of ratings")
    ax.yaxis.set_major_formatter(lambda v, _pos: f"{100 * v:.0f} %")
    ax.legend(frameon=False, fontsize=7.5, ncol=min(n, 4), loc="upper left")
    ax.grid(axis="y", color="#c4c9cf", lw=0.4)
    ax.set_axisbelow(True)
    _tight(fig)
    return Chart(name, _svg(fig), title, alt, note)


def item_map(
    name: str,
    title: str,
    grid: Sequence[Sequence[int]],
    items: Sequence[str],
    columns: Sequence[str],
    categories: Sequence[str],
    reference: Sequence[int] | None,
    *,
    ordinal: bool,
    alt: str,
    note: str = "",
) -> Chart:
    """Items (rows, hardest first) × rater-trial columns, cells filled by category; reference beside.

    ``grid[i][c]`` is a category index or -1 (missing).  The cell image is rasterised.
    """
    import numpy as np
    from matplotlib.colors import ListedColormap

    plt = _plt()
    _style(plt, name)
    k = len(categories)
    colours = category_fills(k, ordinal=ordinal)
    cmap = ListedColormap([(1.0, 1.0, 1.0)] + list(colours))
    g = np.asarray(grid, dtype=float) + 1  # -1 → 0 (white)
    n_items = g.shape[0]
    n_cols = g.shape[1]
    extra = 2 if reference is not None else 0
    full = np.zeros((n_items, n_cols + extra))
    full[:, :n_cols] = g
    if reference is not None:
        full[:, n_cols] = np.nan
        full[:, n_cols + 1] = np.asarray(reference, dtype=float) + 1
    height = min(0.14 * n_items + 1.4, 9.2)
    width = min(0.26 * (n_cols + extra) + 2.4, PRINT_WIDTH_IN - 1.9)
    fig, ax = plt.subplots(figsize=(width, height))
    masked = np.ma.masked_invalid(full)
    ax.imshow(
        masked, cmap=cmap, vmin=0, vmax=k, aspect="auto", interpolation="nearest", rasterized=True
    )
    from matplotlib.patches import Rectangle

    missing = np.argwhere(np.asarray(grid) < 0)
    for i, c in missing.tolist():
        ax.add_patch(
            Rectangle(
                (c - 0.5, i - 0.5),
                1,
                1,
                facecolor="none",
                edgecolor=MISSING_EDGE,
                hatch=MISSING_HATCH,
                lw=0,
            )
        )
    if reference is not None:
        ref = np.asarray(reference)
        for i in range(n_items):
            if ref[i] < 0:
                continue
            wrong = np.nonzero((np.asarray(grid[i]) >= 0) & (np.asarray(grid[i]) != ref[i]))[0]
            if wrong.size:
                ax.plot(
                    wrong,
                    [i] * wrong.size,
                    ls="",
                    marker="o",
                    ms=2.2,
                    color=OCHRE,
                    mec=INK,
                    mew=0.3,
                )
    labels = [_short(c, 10) for c in columns] + (["", "reference"] if reference is not None else [])
    ax.set_xticks(range(n_cols + extra))
    ax.set_xticklabels(labels, rotation=90, fontsize=7.5)
    step = max(1, n_items // 48)
    ax.set_yticks(range(0, n_items, step))
    ax.set_yticklabels([_short(items[i], 14) for i in range(0, n_items, step)], fontsize=7)
    ax.tick_params(length=0)
    ax.spines[:].set_visible(False)
    from matplotlib.patches import Patch

    handles = [
        Patch(facecolor=colours[i], edgecolor=INK, lw=0.4, label=_short(categories[i], 16))
        for i in range(k)
    ]
    handles.append(
        Patch(
            facecolor="white", edgecolor=MISSING_EDGE, hatch=MISSING_HATCH, lw=0.4, label="missing"
        )
    )
    if reference is not None:
        from matplotlib.lines import Line2D

        handles.append(
            Line2D(
                [],
                [],
                ls="",
                marker="o",
                ms=3,
                color=OCHRE,
                mec=INK,
                mew=0.3,
                label="differs from reference",
            )
        )
    ax.legend(
        handles=handles, loc="upper left", bbox_to_anchor=(1.01, 1.0), frameon=False, fontsize=7.5
    )
    _tight(fig)
    return Chart(name, _svg(fig), title, alt, note)


# --------------------------------------------------------------------------------------------
# the report's chart set
# --------------------------------------------------------------------------------------------


def _band_for(rules: Sequence[Any], group: str, key: str) -> Band | None:
    """The acceptance band of a criterion on ``<group>.<rater or *>.<key>`` (first match)."""
    for r in rules:
        measure = str(r.get("measure", ""))
        parts = measure.split(".")
        if parts and parts[0] == group and parts[-1] == key and r.get("pass_level") is not None:
            try:
                p = float(r["pass_level"])
                m = r.get("marginal_level")
                return Band(
                    p, float(m) if m is not None else None, str(r.get("better") or "higher")
                )
            except (TypeError, ValueError):
                continue
    return None


def _rules_of(study: Any, verdict: Any) -> list[dict[str, Any]]:
    if verdict and verdict.get("rules"):
        return list(verdict["rules"])
    crit = getattr(study, "criteria", None)
    out = []
    if isinstance(crit, dict):
        for r in crit.get("rules") or []:
            if isinstance(r, dict):
                out.append(
                    {
                        "measure": r.get("measure"),
                        "pass_level": r.get("pass"),
                        "marginal_level": r.get("marginal"),
                        "better": r.get("better", "higher"),
                    }
                )
    return out


def _points(per_rater: dict[str, Any], key: str, names: dict[str, str]) -> list[Point]:
    pts = []
    for rid, e in per_rater.items():
        m = e.get(key)
        if not isinstance(m, dict):
            continue
        pts.append(Point(names.get(rid, rid), m.get("estimate"), m.get("ci_low"), m.get("ci_high")))
    return pts


def _range(
    points: Sequence[Point], band: Band | None, *, coefficient: bool, rate: bool = False
) -> tuple[float, float]:
    vals = [v for p in points for v in (p.estimate, p.low, p.high) if v is not None]
    if band is not None:
        vals += [band.pass_level] + (
            [band.marginal_level] if band.marginal_level is not None else []
        )
    if rate:
        hi = max(vals + [0.05])
        return 0.0, min(1.0, hi * 1.15 + 0.01)
    lo = min(vals + [0.0]) if coefficient else min(vals + [0.5])
    lo = max(-1.0, (int(lo * 10) - 1) / 10 if lo < 0 else int(lo * 10) / 10)
    return lo, 1.0


def report_charts(
    study: Any, ratings: Any, results: dict[str, Any], verdict: dict[str, Any] | None
) -> dict[str, Chart]:
    """Every chart that applies to the study, by name."""
    charts: dict[str, Chart] = {}
    rules = _rules_of(study, verdict)
    names = {r.id: r.id for r in study.raters}
    labels = {c.code: c.label for c in study.categories}
    level = f"{100 * study.confidence:g} %"

    panels: list[tuple[str, Sequence[Point], Band | None, tuple[float, float]]] = []
    rep = results.get("repeatability") or {}
    acc = results.get("accuracy") or {}
    for group, per, key, title, kind in (
        ("repeatability", rep, "agreement", "Repeatability: agreement rate", "p"),
        ("accuracy", acc, "effectiveness", "Accuracy: effectiveness", "p"),
        (
            "accuracy",
            acc,
            "weighted_kappa" if study.scale == "ordinal" else "cohen_kappa",
            "Accuracy: weighted kappa" if study.scale == "ordinal" else "Accuracy: Cohen's kappa",
            "k",
        ),
        ("accuracy", acc, "miss_rate", "Miss rate", "r"),
        ("accuracy", acc, "false_alarm_rate", "False alarm rate", "r"),
    ):
        pts = _points(per, key, names)
        if not pts:
            continue
        band = _band_for(rules, group, key)
        panels.append(
            (title, pts, band, _range(pts, band, coefficient=kind == "k", rate=kind == "r"))
        )
    if panels:
        charts["rater_figures"] = interval_panels(
            "rater-figures",
            f"Each rater's figures with {level} intervals",
            panels,
            alt="For each rater, the estimate (diamond) and its interval (bar) of each figure, "
            "drawn over the acceptance bands of the study's criteria where a criterion applies.",
            note="Plain shading: meets; horizontal lines: marginal; diagonal lines: short. A bar crossing a band edge "
            "means the data cannot yet tell which side the rater is on.",
        )

    conf_maps = []
    for rid, e in acc.items():
        conf = e.get("confusion")
        if not isinstance(conf, dict) or "counts" not in conf:
            continue
        counts = conf["counts"]
        if conf.get("rows") == "rater":
            counts = [list(c) for c in zip(*counts, strict=True)]
        conf_maps.append((names.get(rid, rid), counts))
    if conf_maps:
        cats = [labels.get(c, c) for c in study.category_codes]
        charts["confusion"] = confusion_maps(
            "confusion",
            "Ratings against the reference, per rater",
            conf_maps,
            cats,
            alt="One grid per rater: rows are the reference category, columns the category the rater "
            "gave; each cell counts ratings. The diagonal holds the correct ratings.",
            note="Darker cells hold more ratings; counts off the diagonal are the mix-ups.",
        )

    by_cat = (results.get("reproducibility") or {}).get("fleiss_kappa_by_category") or {}
    # on a binary scale the two categories' kappas are the same figure: no chart of them
    if by_cat and study.scale != "binary":
        pts = [
            Point(labels.get(code, code), m.get("estimate"), m.get("ci_low"), m.get("ci_high"))
            for code, m in by_cat.items()
            if isinstance(m, dict)
        ]
        band = _band_for(rules, "reproducibility", "fleiss_kappa")
        charts["by_category"] = interval_panels(
            "by-category",
            f"Fleiss' kappa per category with {level} intervals",
            [("Fleiss' kappa per category", pts, band, _range(pts, band, coefficient=True))],
            alt="For each category, Fleiss' kappa among all raters with its interval.",
            note="A category far below the others is the one raters do not separate well.",
        )

    ordinal = results.get("ordinal") or {}
    if study.scale == "ordinal" and ordinal.get("accuracy"):
        k = len(study.categories)
        steps = list(range(-(k - 1), k))
        series = [
            (names.get(rid, rid), [int((e.get("offsets") or {}).get(str(s), 0)) for s in steps])
            for rid, e in ordinal["accuracy"].items()
        ]
        charts["steps_apart"] = steps_apart(
            "steps-apart",
            "How far ratings fall from the reference",
            steps,
            series,
            alt="For each rater, the share of ratings that equal the reference (0) or fall one, two or "
            "more categories away from it, on the better (−) or worse (+) side.",
            note="Bars left of zero: the rater grades more leniently than the reference; right: more strictly.",
        )

    if ratings is not None and ratings.n_items > 0:
        import numpy as np

        agreement = {
            str(it.get("id")): it.get("agreement")
            for it in results.get("items") or []
            if isinstance(it, dict)
        }
        keys = [agreement.get(item) for item in ratings.items]
        order = sorted(
            range(ratings.n_items),
            key=lambda i: (1.0 if keys[i] is None else keys[i], ratings.items[i]),
        )
        flat = ratings.codes.reshape(ratings.n_items, -1)
        grid = np.asarray(flat)[order].tolist()
        cols = [
            f"{r} t{t + 1}" if ratings.n_trials > 1 else r
            for r in ratings.raters
            for t in range(ratings.n_trials)
        ]
        ref = None
        if ratings.reference is not None:
            ref = np.asarray(ratings.reference)[order].tolist()
        charts["item_map"] = item_map(
            "item-map",
            "Every rating, items sorted from least to most agreement",
            grid,
            [ratings.items[i] for i in order],
            cols,
            [labels.get(c, c) for c in ratings.categories],
            ref,
            ordinal=study.scale == "ordinal",
            alt="A grid with one row per item and one column per rater and trial, each cell filled "
            "with the category given; the items with the least agreement are at the top"
            + (", with the reference category in the last column." if ref is not None else "."),
            note="Rows at the top mix categories: these are the items to review as limit samples.",
        )
    return charts
