"""The PDF: PDF/A-3b, attachments, metadata, page furniture, fonts, locked-down fetching,
reproducibility and the atomic, no-overwrite revision folder."""

from __future__ import annotations

import datetime as dt
import hashlib
import http.server
import io
import os
import shutil
import subprocess
import sys
import threading
from pathlib import Path

import pypdf
import pytest

from reportgen.errors import ExistsError, RenderError
from reportgen.render.filters import fmt_estimate

from .conftest import (
    GENERATED_AT,
    SECTION_TITLES,
    STUDIES,
    WHEN,
    Built,
    build,
    pdftotext_pages,
    small_study,
)


def test_pdfa3b_and_attachments(built_binary: Built) -> None:
    reader = pypdf.PdfReader(io.BytesIO(built_binary.pdf))
    xmp = reader.trailer["/Root"]["/Metadata"].get_object().get_data().decode("utf-8")
    assert "<pdfaid:part>3</pdfaid:part>" in xmp or 'pdfaid:part="3"' in xmp
    assert "<pdfaid:conformance>B</pdfaid:conformance>" in xmp or 'pdfaid:conformance="B"' in xmp
    atts = reader.attachments
    folder = STUDIES / "seal-check"
    assert sorted(atts) == sorted(
        ["study.yaml", "ratings.csv", "reference.csv", "results.json", "build-record.json"]
    )
    for name in ("study.yaml", "ratings.csv", "reference.csv"):
        assert atts[name][0] == (folder / name).read_bytes(), name
    assert atts["results.json"][0] == (built_binary.folder / "results.json").read_bytes()


def test_metadata_from_study(built_binary: Built) -> None:
    meta = pypdf.PdfReader(io.BytesIO(built_binary.pdf)).metadata
    s = built_binary.study
    assert meta.title == f"{s.id} revision {s.revision}: {s.title}"
    assert meta.author == s.signoff.prepared_by
    assert s.id in meta.get("/Keywords") and "attribute agreement" in meta.get("/Keywords")
    assert built_binary.results["verdict"]["outcome"] in meta.subject
    assert meta.get("/CreationDate") == "D:20261120090000Z"
    assert meta.creator.startswith("reportgen ")


def test_pages_header_footer_sections(built_binary: Built) -> None:
    pages = pdftotext_pages(built_binary.pdf_path)
    n = len(pages)
    assert n >= 5
    outcome = built_binary.results["verdict"]["outcome"]
    head = f"{built_binary.study.id} · revision 1 · {outcome}"
    for i, text in enumerate(pages, 1):
        assert f"page {i} of {n}" in text, i
        assert head in text, i
        assert "DRAFT" not in text
    full = " ".join(" ".join(pages).split())
    for title in SECTION_TITLES:
        if title != "Ordered-scale agreement":
            assert title in full, title
    # the first page holds the verdict and the deciding figures
    assert outcome in pages[0] and "The figures that decide the outcome" in pages[0]
    assert fmt_estimate(built_binary.results["reproducibility"]["fleiss_kappa"]) in full


def test_paper_letter(tmp_path: Path) -> None:
    b = build(small_study(tmp_path / "s", report={"paper": "letter"}), tmp_path / "out")
    box = pypdf.PdfReader(io.BytesIO(b.pdf)).pages[0].mediabox
    assert (round(float(box.width)), round(float(box.height))) == (612, 792)


@pytest.mark.skipif(not shutil.which("pdffonts"), reason="poppler-utils (pdffonts) not installed")
def test_only_shipped_fonts_embedded(built_binary: Built) -> None:
    out = subprocess.run(
        ["pdffonts", str(built_binary.pdf_path)], capture_output=True, text=True, check=True
    ).stdout
    rows = out.splitlines()[2:]
    assert rows
    for row in rows:
        name = row.split()[0]
        assert "+Report-" in name, row
        assert " yes yes " in row  # embedded, subset


def test_same_inputs_same_bytes(tmp_path: Path, built_binary: Built) -> None:
    """A separate process with another hash seed and time zone gives byte-identical files."""
    out = tmp_path / "again"
    env = dict(os.environ, PYTHONHASHSEED="7", TZ="Asia/Tokyo", CI="true")
    r = subprocess.run(
        [
            sys.executable,
            "-m",
            "reportgen",
            "build",
            str(STUDIES / "seal-check" / "study.yaml"),
            "-o",
            str(out),
            "--generated-at",
            GENERATED_AT,
        ],
        capture_output=True,
        text=True,
        env=env,
        cwd=tmp_path,
    )
    assert r.returncode == 0, r.stderr
    again = out / built_binary.study.id / "rev1"
    names = sorted(p.name for p in again.iterdir())
    assert names == sorted(p.name for p in built_binary.folder.iterdir())
    differ = [
        n for n in names if (again / n).read_bytes() != (built_binary.folder / n).read_bytes()
    ]
    assert differ == []


def test_other_time_other_bytes(tmp_path: Path) -> None:
    s = small_study(tmp_path / "s")
    a = build(s, tmp_path / "a")
    b = build(s, tmp_path / "b", generated_at=WHEN + dt.timedelta(days=1))
    assert a.pdf != b.pdf and a.html != b.html
    assert a.html.replace("2026-11-21", "2026-11-20") == b.html.replace("2026-11-21", "2026-11-20")


# ---- the fetcher ---------------------------------------------------------------------------


class _Counter(http.server.BaseHTTPRequestHandler):
    hits = 0

    def do_GET(self) -> None:  # noqa: N802
        type(self).hits += 1
        self.send_response(200)
        self.send_header("Content-Type", "image/png")
        self.end_headers()

    def log_message(self, *a) -> None:  # type: ignore[no-untyped-def]
        pass


@pytest.fixture
def loopback():  # type: ignore[no-untyped-def]
    _Counter.hits = 0
    srv = http.server.HTTPServer(("127.0.0.1", 0), _Counter)
    t = threading.Thread(target=srv.serve_forever, daemon=True)
    t.start()
    yield f"http://127.0.0.1:{srv.server_address[1]}", _Counter
    srv.shutdown()
    srv.server_close()


@pytest.mark.parametrize(
    "markup",
    [
        '<img src="{url}/x.png">',
        '<link rel="attachment" href="file:///etc/hostname">',
        '<a rel="attachment" href="file:///etc/hostname">x</a>',
        '<img src="file:///etc/hostname">',
        '<style>@import url("{url}/a.css");</style>',
        '<div style="background: url({url}/bg.png)">x</div>',
        '<img src="fonts/../../reportgen/__init__.py">',
    ],
)
def test_fetcher_refuses(markup: str, loopback) -> None:  # type: ignore[no-untyped-def]
    from reportgen.render.pdf import render_pdf

    url, counter = loopback
    html = f"<html><head><style>html {{ font-family: serif; }}</style></head><body><p>x</p>{markup.format(url=url)}</body></html>"
    with pytest.raises(RenderError, match="not allowed"):
        render_pdf(html, generated_at=WHEN)
    assert counter.hits == 0


def test_fetcher_allows_package_fonts() -> None:
    from reportgen.render.pdf import render_pdf

    html = (
        '<html><head><style>@font-face { font-family: "T"; src: url("fonts/DejaVuSans.ttf"); } '
        'html { font-family: "T"; }</style></head><body><p>ok</p></body></html>'
    )
    assert render_pdf(html, generated_at=WHEN).startswith(b"%PDF-1.7")


# ---- the revision folder -------------------------------------------------------------------


def test_existing_revision_refused_then_replaced_as_draft(tmp_path: Path, run_cli) -> None:  # type: ignore[no-untyped-def]
    s = small_study(tmp_path / "s")
    out = tmp_path / "out"
    # the first build needs no PDF (test speed): the folder exists either way
    code, _o, err = run_cli(
        "build", s, "-o", out, "--generated-at", GENERATED_AT, "--quiet", "--no-pdf"
    )
    assert code == 0, err
    folder = out / "TEST-01" / "rev1"
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    code, _o, err = run_cli("build", s, "-o", out, "--generated-at", GENERATED_AT, "--quiet")
    assert code == 5
    assert "raise study.revision" in err and "--replace" in err
    assert {p.name: p.read_bytes() for p in folder.iterdir()} == before
    code, _o, err = run_cli(
        "build", s, "-o", out, "--generated-at", GENERATED_AT, "--replace", "--quiet"
    )
    assert code == 0, err
    pages = pdftotext_pages(folder / "TEST-01-rev1.pdf")
    assert all("DRAFT" in p for p in pages)
    assert "DRAFT" in (folder / "TEST-01-rev1.html").read_text(encoding="utf-8")
    assert [p.name for p in (out / "TEST-01").iterdir()] == ["rev1"]  # no temporary siblings left


def test_failed_render_writes_nothing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    import reportgen.render.pdf as pdf

    def boom(*a, **k):  # type: ignore[no-untyped-def]
        raise RenderError("simulated failure")

    monkeypatch.setattr(pdf, "render_pdf", boom)
    with pytest.raises(RenderError):
        build(small_study(tmp_path / "s"), tmp_path / "out")
    assert not (tmp_path / "out" / "TEST-01" / "rev1").exists()
    assert list((tmp_path / "out").rglob("*")) in ([], [tmp_path / "out" / "TEST-01"])


def test_write_folder_is_whole_or_nothing(tmp_path: Path) -> None:
    from reportgen.render.build import write_folder

    target = tmp_path / "S" / "rev1"
    write_folder(target, {"a.txt": b"1", "b.txt": b"2"})
    assert sorted(p.name for p in target.iterdir()) == ["a.txt", "b.txt"]
    assert oct(target.joinpath("a.txt").stat().st_mode & 0o777) == "0o444"
    with pytest.raises(ExistsError):
        write_folder(target, {"c.txt": b"3"})
    write_folder(target, {"c.txt": b"3"}, replace=True)
    assert sorted(p.name for p in target.iterdir()) == ["c.txt"]
    assert sorted(p.name for p in target.parent.iterdir()) == ["rev1"]


def test_strict_refuses_warnings(tmp_path: Path, run_cli) -> None:  # type: ignore[no-untyped-def]
    # one trial: repeatability cannot be judged -> a warning
    s = small_study(tmp_path / "s", trials=1)
    code, _o, err = run_cli(
        "build", s, "-o", tmp_path / "out", "--strict", "--generated-at", GENERATED_AT
    )
    assert code == 4, err
    assert "repeatability" in err and "--strict" in err
    assert not (tmp_path / "out" / "TEST-01").exists()


def test_results_json_is_the_analysis(built_binary: Built) -> None:
    from reportgen.ratings import load_ratings
    from reportgen.render.build import compute_results, results_bytes

    s = built_binary.study
    again = results_bytes(compute_results(s, load_ratings(s)))
    assert (
        hashlib.sha256(again).hexdigest()
        == hashlib.sha256((built_binary.folder / "results.json").read_bytes()).hexdigest()
    )


def test_stale_temporary_folders_cleaned(tmp_path: Path) -> None:
    from reportgen.render.build import write_folder

    stale = tmp_path / "S" / ".rev2.x1.part"
    fresh = tmp_path / "S" / ".rev2.x2.part"  # maybe another build at work: left alone
    stale.mkdir(parents=True)
    fresh.mkdir()
    old = 1_000_000_000
    os.utime(stale, (old, old))
    write_folder(tmp_path / "S" / "rev2", {"a": b"1"})
    assert not stale.exists() and fresh.exists()


# ---- build --archive -----------------------------------------------------------------------


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (
            ["--archive", "--replace"],
            "--archive cannot be used with --replace: a draft is not archived",
        ),
        (["--archive", "--no-pdf"], "--archive cannot be used with --no-pdf"),
        (["--archive-dir", "somewhere"], "--archive-dir is used only together with --archive"),
    ],
)
def test_archive_refusals_are_usage_errors(
    tmp_path: Path, run_cli, extra: list[str], message: str
) -> None:  # type: ignore[no-untyped-def]
    s = small_study(tmp_path / "s")
    code, _o, err = run_cli("build", s, "-o", tmp_path / "out", *extra, "--quiet")
    assert code == 2, err
    assert message in err
    assert not (tmp_path / "out").exists() and not (tmp_path / "somewhere").exists()


@pytest.mark.slow
def test_build_archive(tmp_path: Path, run_cli, monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    from reportgen.archive import is_read_only, list_entries

    monkeypatch.delenv("REPORTGEN_ARCHIVE", raising=False)
    monkeypatch.chdir(tmp_path)
    s = small_study(tmp_path / "s")
    out = tmp_path / "out"
    code, stdout, err = run_cli("build", s, "-o", out, "--generated-at", GENERATED_AT, "--archive")
    assert code == 0, err
    archive = tmp_path / "archive"  # the rule: no archive here or above -> ./archive
    assert f"  archived in {archive / 'TEST-01' / 'rev1'}" in stdout.splitlines()
    (entry,) = list_entries(archive)
    assert (entry.study_id, entry.revision, entry.folder) == ("TEST-01", 1, "TEST-01/rev1")
    built = out / "TEST-01" / "rev1"
    for p in built.iterdir():
        copy = archive / "TEST-01" / "rev1" / p.name
        assert copy.read_bytes() == p.read_bytes() and is_read_only(copy), p.name
    assert entry.files == {
        p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in built.iterdir()
    }


def test_build_archive_failure_says_the_report_was_built(
    tmp_path: Path, run_cli, monkeypatch: pytest.MonkeyPatch
) -> None:  # type: ignore[no-untyped-def]
    import reportgen.archive as archive_mod
    import reportgen.render.build as build_mod

    folder = tmp_path / "out" / "TEST-01" / "rev1"

    def fake_build(*a, **k):  # type: ignore[no-untyped-def]
        folder.mkdir(parents=True)
        return folder

    def refuse(*a, **k):  # type: ignore[no-untyped-def]
        raise ExistsError("TEST-01 rev1 is already archived")

    monkeypatch.setattr(build_mod, "build_report", fake_build)
    monkeypatch.setattr(archive_mod, "archive_revision", refuse)
    s = small_study(tmp_path / "s")
    code, _o, err = run_cli(
        "build", s, "-o", tmp_path / "out", "--archive", "--archive-dir", tmp_path / "a", "--quiet"
    )
    assert code == 5, err
    assert (
        f"TEST-01 revision 1: the report was built in {folder}, but it could not be archived:"
        in err
    )
    assert "already archived" in err
