"""Test helper: write a built revision folder (output/<id>/rev<N>) without the render stack.

The folder holds what ``reportgen build`` writes: ``<id>-rev<N>.html``, ``<id>-rev<N>.pdf``
(a one-page PDF carrying the study definition, the ratings, the reference and results.json as
attachments), ``results.json`` and a chart.  Figures are invented for the archive, history and
register tests; they are not computed from the ratings (verify's tests use real builds).
"""

from __future__ import annotations

import hashlib
import io
import json
from pathlib import Path
from typing import Any

from reportgen.buildrecord import BuildRecord, manifest_bytes


def record(est: float, half: float = 0.05, items: int = 30) -> dict[str, Any]:
    return {
        "estimate": est,
        "se": half / 1.96,
        "ci_low": est - half,
        "ci_high": est + half,
        "ci_method": "wilson",
        "p_value": None,
        "items": items,
        "agreeing": None,
    }


def study_yaml(
    study_id: str,
    revision: int,
    *,
    date: str | None,
    characteristic: str,
    station: str,
    raters: dict[str, str],
    valid_months: int = 12,
) -> str:
    lines = [
        "study:",
        f"  id: {study_id}",
        f'  title: "Seal seating check, {characteristic}"',
        f'  characteristic: "{characteristic}"',
        f'  station: "{station}"',
        f"  revision: {revision}",
    ]
    if date:
        lines.append(f"  date: {date}")
    lines += [
        "scale: binary",
        "categories:",
        "  - {code: OK, label: Seated}",
        "  - {code: NG, label: Not seated}",
        "defect_category: NG",
        "raters:",
        *[f'  - {{id: {rid}, name: "{name}"}}' for rid, name in raters.items()],
        "trials: 2",
        "ratings: ratings.csv",
        "reference: reference.csv",
        "certification:",
        '  source: "Qualification rule invented for the tests"',
        f"  valid_months: {valid_months}",
        "  rules: [{measure: accuracy.agreement, pass: 0.9, judge: estimate}]",
    ]
    return "\n".join(lines) + "\n"


def _end_of_month_after(date: str, months: int) -> str:
    import calendar
    import datetime as dt

    d = dt.date.fromisoformat(date)
    y, m = divmod(d.month - 1 + months, 12)
    return dt.date(d.year + y, m + 1, calendar.monthrange(d.year + y, m + 1)[1]).isoformat()


def make_pdf(attachments: dict[str, bytes], text: str = "", state: str | None = None) -> bytes:
    import pypdf

    w = pypdf.PdfWriter()
    w.add_blank_page(595, 842)
    w.add_metadata({"/Title": text or "test report", **({"/ReportState": state} if state else {})})
    for name, data in attachments.items():
        w.add_attachment(name, data)
    buf = io.BytesIO()
    w.write(buf)
    return buf.getvalue()


def make_revision(
    output: Path,
    study_id: str = "SEAL-CHECK",
    revision: int = 1,
    *,
    date: str | None = "2026-01-15",
    characteristic: str = "Seal seating",
    station: str = "Press line 2",
    raters: dict[str, str] | None = None,
    certified: dict[str, bool] | None = None,
    kappa: float = 0.80,
    rater_agreement: dict[str, float] | None = None,
    items: list[str] | None = None,
    verdict: str = "PASS",
    valid_months: int = 12,
    big_file_bytes: int = 0,
    state: str = "release",
) -> Path:
    raters = raters or {"I1": "Ana Ruiz", "I2": "Ben Okafor"}
    certified = certified if certified is not None else {r: True for r in raters}
    rater_agreement = rater_agreement or {r: 0.9 for r in raters}
    items = items or [f"S-{i:02d}" for i in range(1, 31)]
    ratings = "item,rater,trial,rating\n" + "".join(
        f"{it},{r},{t},OK\n" for it in items for r in raters for t in (1, 2)
    )
    reference = "item,reference\n" + "".join(f"{it},OK\n" for it in items)
    yaml_text = study_yaml(
        study_id,
        revision,
        date=date,
        characteristic=characteristic,
        station=station,
        raters=raters,
        valid_months=valid_months,
    )
    results: dict[str, Any] = {
        "schema": "reportgen-results/1",
        "study": {
            "id": study_id,
            "revision": revision,
            "title": f"Seal seating check, {characteristic}",
            "scale": "binary",
        },
        "design": {
            "items": len(items),
            "raters": len(raters),
            "trials": 2,
            "scale": "binary",
            "confidence_level": 0.95,
        },
        "repeatability": {r: {"agreement": record(rater_agreement[r] + 0.02)} for r in raters},
        "accuracy": {
            r: {"agreement": record(rater_agreement[r]), "miss_rate": record(0.03, 0.02)}
            for r in raters
        },
        "reproducibility": {"agreement": record(0.85), "fleiss_kappa": record(kappa, 0.08)},
        "panel_accuracy": {"agreement": record(0.8), "effectiveness": record(0.8)},
        "items": [{"id": it} for it in items],
        "warnings": [],
        "criteria": [],
        "verdict": {"outcome": verdict, "sentence": f"{verdict}: invented for a test."},
        "certification": {
            "valid_months": valid_months,
            "due_window_days": 30,
            "study_date": date,
            "inspectors": [
                {
                    "rater": r,
                    "name": raters[r],
                    "outcome": "certified" if certified[r] else "not certified",
                    "certified_on": date if certified[r] else None,
                    "valid_until": _end_of_month_after(date, valid_months)
                    if certified[r] and date
                    else None,
                }
                for r in raters
            ],
        },
        "actions": [],
    }
    folder = output / study_id / f"rev{revision}"
    folder.mkdir(parents=True)
    results_bytes = (json.dumps(results, indent=2) + "\n").encode()
    (folder / "results.json").write_bytes(results_bytes)
    (folder / f"{study_id}-rev{revision}.html").write_text(
        f"<html><body>{study_id}</body></html>\n"
    )
    (folder / "charts").mkdir()
    (folder / "charts" / "agreement.svg").write_text("<svg xmlns='http://www.w3.org/2000/svg'/>\n")
    if big_file_bytes:
        (folder / "charts" / "zz-big.bin").write_bytes(b"\0" * big_file_bytes)
    # what build writes beside the PDF: its SHA-256 in the PDF's build record, then SHA256SUMS
    side = {
        p.relative_to(folder).as_posix(): p.read_bytes()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }
    build_record = BuildRecord(
        state=state,
        generated_at="2026-03-01T12:00:00Z",
        software=[{"name": "reportgen", "version": "test"}],
        files={n: hashlib.sha256(d).hexdigest() for n, d in side.items()},
    ).to_bytes()
    pdf = make_pdf(
        {
            "study.yaml": yaml_text.encode(),
            "ratings.csv": ratings.encode(),
            "reference.csv": reference.encode(),
            "results.json": results_bytes,
            "build-record.json": build_record,
        },
        f"{study_id} rev{revision}",
        state=state,
    )
    (folder / f"{study_id}-rev{revision}.pdf").write_bytes(pdf)
    side[f"{study_id}-rev{revision}.pdf"] = pdf
    (folder / "SHA256SUMS").write_bytes(manifest_bytes(side))
    return folder
