"""Requalification history: series, item-set changes, superseded revisions, noise vs drift, HTML/PDF."""

from __future__ import annotations

import datetime as dt
import io
from pathlib import Path

import pytest
from _revisions import make_revision
from click.testing import CliRunner

from reportgen.archive import archive_revision, list_entries
from reportgen.cli import cli
from reportgen.errors import InputError
from reportgen.history import (
    Shift,
    build_history,
    format_text,
    load_history,
    render_history_html,
    render_history_pdf,
)

WHEN = dt.datetime(2027, 2, 1, 9, 0, tzinfo=dt.UTC)
FIRST_ITEMS = [f"S-{i:02d}" for i in range(1, 31)]
LATER_ITEMS = [f"S-{i:02d}" for i in range(5, 40)]  # 4 items retired, 9 new ones


@pytest.fixture()
def archive(tmp_path: Path) -> Path:
    out, root = tmp_path / "output", tmp_path / "archive"
    archive_revision(
        make_revision(out, "SEAL-CHECK", 1, date="2026-01-15", kappa=0.80), archive_dir=root
    )
    archive_revision(
        make_revision(out, "SEAL-CHECK", 2, date="2026-01-20", kappa=0.82), archive_dir=root
    )
    archive_revision(
        make_revision(
            out,
            "SEAL-CHECK-27",
            1,
            date="2027-01-10",
            kappa=0.55,
            items=LATER_ITEMS,
            rater_agreement={"I1": 0.70, "I2": 0.95},
        ),
        archive_dir=root,
    )
    archive_revision(
        make_revision(
            out,
            "CRIMP-CHECK",
            1,
            date="2026-06-01",
            characteristic="Crimp height <b>",
            station="Bench 4",
            raters={"C1": "Ana Ruiz"},
        ),
        archive_dir=root,
    )
    return root


def test_series_marks_item_set_changes_and_superseded(archive: Path) -> None:
    series = build_history(list_entries(archive))
    assert [s.title for s in series] == [
        "Crimp height <b> · Bench 4",
        "Seal seating · Press line 2",
    ]
    seal = series[1]
    assert [p.label for p in seal.points] == [
        "SEAL-CHECK rev1",
        "SEAL-CHECK rev2",
        "SEAL-CHECK-27 rev1",
    ]
    assert [p.superseded_by for p in seal.points] == [2, None, None]
    assert [(p.item_set_changed, p.items_added, p.items_removed) for p in seal.points] == [
        (False, 0, 0),
        (False, 0, 0),
        (True, 9, 4),
    ]
    assert seal.inspectors == ("Ana Ruiz", "Ben Okafor")
    assert [r["estimate"] for r in seal.inspector("Ana Ruiz", "accuracy.agreement")] == [
        0.9,
        0.9,
        0.7,
    ]
    assert seal.inspector("Nobody", "accuracy.agreement") == [None, None, None]


def test_noise_is_not_read_as_drift(archive: Path) -> None:
    seal = build_history(list_entries(archive))[1]
    kappa = [sh for sh in seal.shifts if sh.measure == "reproducibility.fleiss_kappa"]
    # 0.80 ± 0.08 → 0.82 ± 0.08: intervals overlap; 0.82 ± 0.08 → 0.55 ± 0.08: they do not
    assert [
        (sh.before, sh.after, round(sh.change, 12), sh.overlap, sh.item_set_changed) for sh in kappa
    ] == [
        ("SEAL-CHECK rev1", "SEAL-CHECK rev2", 0.02, True, False),
        ("SEAL-CHECK rev2", "SEAL-CHECK-27 rev1", -0.27, False, True),
    ]
    assert "may be noise" in kappa[0].reading
    assert kappa[1].reading.startswith(
        "Fleiss' kappa among raters down by 0.270 from SEAL-CHECK rev2"
    )
    assert kappa[1].reading.endswith("the item set changed here.")
    ben = [
        sh
        for sh in seal.shifts
        if sh.inspector == "Ben Okafor" and sh.measure == "accuracy.agreement"
    ]
    # 0.90 ± 0.05 → 0.95 ± 0.05: touching intervals count as overlapping
    assert [sh.overlap for sh in ben] == [True, True]


def test_touching_and_missing_intervals() -> None:
    from reportgen.history import _overlap

    assert _overlap({"ci_low": 0.1, "ci_high": 0.5}, {"ci_low": 0.5, "ci_high": 0.9}) is True
    assert _overlap({"ci_low": 0.1, "ci_high": 0.4999}, {"ci_low": 0.5, "ci_high": 0.9}) is False
    assert _overlap({"ci_low": None, "ci_high": 0.5}, {"ci_low": 0.5, "ci_high": 0.9}) is None
    s = Shift("accuracy.miss_rate", "Ana", "A rev1", "A rev2", 0.0, True, False)
    assert s.reading.startswith("Ana: Miss rate unchanged by 0.000")


def test_filters_and_empty_archive(archive: Path) -> None:
    entries, series = load_history(archive, characteristic="seal seating")
    assert len(entries) == 3 and len(series) == 1
    with pytest.raises(InputError, match="no studies for characteristic 'Paint'"):
        load_history(archive, characteristic="Paint")
    _, series = load_history(archive, station="Bench 4")
    assert [p.label for p in series[0].points] == ["CRIMP-CHECK rev1"]


def test_text_summary(archive: Path) -> None:
    entries, series = load_history(archive)
    text = format_text(entries, series)
    assert (
        "  2026-01-15  SEAL-CHECK rev1          PASS     Fleiss' kappa among raters 0.800 (0.720 to 0.880)  [superseded by rev2]"
        in text
    )
    assert "[new item set: +9 / -4 items]" in text
    assert text.rstrip().endswith("4 archived revision(s) in 2 series.")


def test_html_report(archive: Path) -> None:
    entries, series = load_history(archive)
    html = render_history_html(entries, series, generated_at=WHEN)
    assert html == render_history_html(
        entries, series, generated_at=WHEN
    )  # deterministic, charts included
    assert (
        html.count('<img src="data:image/svg+xml;base64,') == 4
    )  # panel + inspector chart per series
    assert "Crimp height &lt;b&gt;" in html and "Crimp height <b>" not in html
    for label in ("SEAL-CHECK", "SEAL-CHECK-27", "CRIMP-CHECK"):
        assert f"<td>{label}</td>" in html
    assert "superseded by rev2" in html and "new item set (+9 / −4)" in html
    assert "Changes larger than the noise" in html
    assert "Generated 2027-02-01T09:00:00Z" in html


@pytest.mark.render
# WeasyPrint 70 leaves its ICC profile file open (a ResourceWarning outside our code)
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_pdf_report(archive: Path) -> None:
    import pypdf

    entries, series = load_history(archive)
    pdf = render_history_pdf(
        render_history_html(entries, series, generated_at=WHEN), generated_at=WHEN
    )
    reader = pypdf.PdfReader(io.BytesIO(pdf))
    text = " ".join(p.extract_text() for p in reader.pages)
    assert (
        "Requalification history" in text
        and "SEAL-CHECK-27" in text
        and "Every archived study" in text
    )
    assert reader.metadata is not None and reader.metadata.title == "Requalification history"


def test_cli(archive: Path, tmp_path: Path) -> None:
    runner = CliRunner()
    r = runner.invoke(
        cli, ["history", "--archive", str(archive), "--characteristic", "Seal seating"]
    )
    assert r.exit_code == 0, r.output
    assert "Seal seating · Press line 2" in r.output and "CRIMP" not in r.output
    out = tmp_path / "trend" / "history.html"
    r = runner.invoke(
        cli,
        [
            "history",
            "--archive",
            str(archive),
            "-o",
            str(out),
            "--generated-at",
            "2027-02-01T09:00:00Z",
        ],
    )
    assert r.exit_code == 0, r.output
    assert "Generated 2027-02-01T09:00:00Z" in out.read_text()
    r = runner.invoke(cli, ["history", "--archive", str(archive), "-o", str(tmp_path / "h.txt")])
    assert isinstance(r.exception, InputError) and "written as .html or .pdf" in str(r.exception)
