"""Charts of the measured-reference analyses: gauge performance curves, probability of
detection curves and the disagreement zone on the value axis.  Hooked into
``charts.report_charts``; matplotlib is imported inside the functions (via ``charts._plt``)."""

from __future__ import annotations

from typing import Any

from .charts import INK, MIST, OCHRE, SLATE, Chart, _plt, _short, _style, _svg, _tight


def _limits(ax: Any, m: dict[str, Any]) -> None:
    for key, word in (("lower_limit", "lower limit"), ("upper_limit", "upper limit")):
        if m.get(key) is not None:
            ax.axvline(m[key], color=OCHRE, lw=1.1, ls="--", label=word)


def gauge_curves(m: dict[str, Any], name: str = "gauge-curve") -> Chart | None:
    curves = m.get("gauge_curve") or {}
    if not curves:
        return None
    plt = _plt()
    _style(plt, name)
    panels = [
        (rid, side, rec) for rid, per in sorted(curves.items()) for side, rec in sorted(per.items())
    ]
    fig, axes = plt.subplots(len(panels), 1, figsize=(6.4, 1.9 * len(panels) + 0.3), squeeze=False)
    for ax, (rid, side, rec) in zip(axes[:, 0], panels, strict=True):
        pts = [
            (it["value"], it["by_rater"][rid][0] / it["by_rater"][rid][1])
            for it in m["items"]
            if it["by_rater"].get(rid)
            and it["by_rater"][rid][1] > 0
            and (
                (side == "lower")
                == (
                    m.get("lower_limit") is not None
                    and (
                        m.get("upper_limit") is None
                        or it["value"] < (m["lower_limit"] + m["upper_limit"]) / 2
                    )
                )
            )
        ]
        pr = rec.get("probit") or {}
        if pr.get("curve"):
            xs = [c["value"] for c in pr["curve"]]
            ax.fill_between(
                xs,
                [c["lower"] for c in pr["curve"]],
                [c["upper"] for c in pr["curve"]],
                color=MIST,
                lw=0,
                label="confidence band",
            )
            ax.plot(xs, [c["accept"] for c in pr["curve"]], color=SLATE, lw=1.4, label="probit fit")
        if pts:
            ax.plot(
                [p[0] for p in pts],
                [p[1] for p in pts],
                "o",
                ms=3.5,
                color=INK,
                label="share accepted",
            )
        ax.axvline(rec["limit"], color=OCHRE, lw=1.1, ls="--", label=f"{side} limit")
        ax.set_ylim(-0.04, 1.04)
        ax.set_ylabel("acceptance")
        ax.set_title(f"{_short(rid)}, {side} limit", fontsize=8.5, loc="left")
        ax.grid(color="#c4c9cf", lw=0.4)
        ax.set_axisbelow(True)
    axes[-1, 0].set_xlabel(f"reference value ({m['unit']})")
    axes[0, 0].legend(frameon=False, fontsize=7, loc="best")
    _tight(fig)
    return Chart(
        name,
        _svg(fig),
        "Gauge performance curves",
        "For each rater and limit: the share of checks accepted per item against its reference "
        "value (dots), the fitted probit curve with its confidence band, and the limit (dashed).",
        "Where the curve crosses 50 % away from the dashed line, the gauge is biased; the steeper "
        "the curve, the better its repeatability.",
    )


def detection_curves(m: dict[str, Any], name: str = "detection-curve") -> Chart | None:
    det = m.get("detection") or {}
    fits = [("all raters", det.get("pooled") or {})] + sorted((det.get("by_rater") or {}).items())
    fits = [(k, f) for k, f in fits if f.get("curve")]
    if not fits:
        return None
    plt = _plt()
    _style(plt, name)
    fig, ax = plt.subplots(figsize=(6.4, 3.0))
    styles = ("-", "--", "-.", ":", (0, (5, 1)), (0, (1, 1)))
    for s, (who, f) in enumerate(fits):
        xs = [c["size"] for c in f["curve"]]
        if s == 0:
            ax.fill_between(
                xs,
                [c["lower"] for c in f["curve"]],
                [c["upper"] for c in f["curve"]],
                color=MIST,
                lw=0,
                label="band, all raters",
            )
        ax.plot(
            xs,
            [c["pod"] for c in f["curve"]],
            color=SLATE if s == 0 else INK,
            lw=1.5 if s == 0 else 0.9,
            ls=styles[s % len(styles)],
            label=_short(who, 20),
        )
    pts = [
        (it["value"], (it["rated"] - it["accepted"]) / it["rated"])
        for it in m["items"]
        if it["rated"]
    ]
    ax.plot(
        [p[0] for p in pts],
        [p[1] for p in pts],
        "o",
        ms=3,
        color=INK,
        alpha=0.7,
        label="share found, per item",
    )
    pooled = det.get("pooled") or {}
    if pooled.get("a90_95") is not None:
        ax.axvline(pooled["a90_95"], color=SLATE, lw=0.9, ls=":", label="a90/95, all raters")
    _limits(ax, m)
    if (pooled.get("size_axis") or "linear") == "log":
        ax.set_xscale("log")
    ax.axhline(0.9, color="#8a949e", lw=0.6)
    ax.set_ylim(-0.04, 1.04)
    ax.set_xlabel(f"size ({m['unit']})")
    ax.set_ylabel("probability of detection")
    ax.grid(color="#c4c9cf", lw=0.4)
    ax.set_axisbelow(True)
    ax.legend(frameon=False, fontsize=6.5, loc="lower right")
    _tight(fig)
    return Chart(
        name,
        _svg(fig),
        "Probability of detection",
        "Fitted probability of detection against size for all raters together (with its band) and "
        "for each rater, the share of looks that found each item (dots), the 90 % line and a90/95.",
        "The size where the lower edge of the band reaches 90 % is the size found with 90 % "
        "probability at the stated confidence.",
    )


def zone_chart(m: dict[str, Any], name: str = "disagreement-zone") -> Chart | None:
    zones = m.get("zone") or {}
    if not zones:
        return None
    plt = _plt()
    _style(plt, name)
    fig, ax = plt.subplots(figsize=(6.4, 1.9))
    for z in zones.values():
        if z.get("accept_end") is not None and z.get("reject_end") is not None:
            lo, hi = sorted((z["accept_end"], z["reject_end"]))
            ax.axvspan(lo, hi, color=MIST, lw=0, label="disagreement zone")
    for it in m["items"]:
        if not it["rated"]:
            continue
        share = it["accepted"] / it["rated"]
        marker, fill = ("o", SLATE) if share == 1 else ("s", INK) if share == 0 else ("D", OCHRE)
        ax.plot([it["value"]], [share], marker, ms=4, color=fill)
    _limits(ax, m)
    ax.plot([], [], "o", color=SLATE, label="all accept")
    ax.plot([], [], "D", color=OCHRE, label="mixed")
    ax.plot([], [], "s", color=INK, label="all reject")
    if (
        any((z.get("limit") or 0) > 0 for z in zones.values())
        and m.get("analyses")
        and "detection" in m["analyses"]
    ):
        det = (m.get("detection") or {}).get("pooled") or {}
        if det.get("size_axis") == "log":
            ax.set_xscale("log")
    handles, labels = ax.get_legend_handles_labels()
    seen: dict[str, Any] = {}
    for h, lab in zip(handles, labels, strict=True):
        seen.setdefault(lab, h)
    ax.legend(seen.values(), seen.keys(), frameon=False, fontsize=6.5, ncol=3, loc="center right")
    ax.set_ylim(-0.08, 1.08)
    ax.set_xlabel(f"reference value ({m['unit']})")
    ax.set_ylabel("share accepted")
    ax.grid(axis="x", color="#c4c9cf", lw=0.4)
    _tight(fig)
    return Chart(
        name,
        _svg(fig),
        "Disagreement zone",
        "Each item at its reference value, marked by whether every rating accepted it, every "
        "rating rejected it, or the ratings were mixed; the shaded range is the disagreement zone.",
        "Items inside the shaded range get different answers from different raters or trials.",
    )


def measured_charts(results: dict[str, Any]) -> dict[str, Chart]:
    m = results.get("measured")
    if not m:
        return {}
    out: dict[str, Chart] = {}
    for key, fn in (
        ("gauge_curve", gauge_curves),
        ("detection_curve", detection_curves),
        ("zone", zone_chart),
    ):
        c = fn(m)
        if c is not None:
            out[key] = c
    return out
