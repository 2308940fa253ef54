"""``reportgen verify``: genuine reports pass; each kind of tampering is caught with its own message."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from _built import attachments_of, built_report, rewrite_attachments

from reportgen.errors import InputError
from reportgen.verify import compare_results, printed_figures, verify_report

pytestmark = [
    pytest.mark.slow,
    pytest.mark.render,
    # WeasyPrint 70 leaves its ICC profile file open while building the fixture reports
    pytest.mark.filterwarnings(
        "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
    ),
]


@pytest.fixture(scope="module")
def report_a(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return built_report(tmp_path_factory, "a")


@pytest.fixture(scope="module")
def report_b(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return built_report(tmp_path_factory, "b")


def _by_check(v) -> dict[str, tuple[bool, str, tuple[str, ...]]]:  # type: ignore[no-untyped-def]
    return {f.check: (f.ok, f.message, f.details) for f in v.findings}


def _cli(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "reportgen", *args], capture_output=True, text=True, timeout=300
    )


def test_genuine_report(report_a: Path) -> None:
    v = verify_report(report_a)
    assert v.ok, v.format()
    checks = _by_check(v)
    assert (v.study_id, v.revision) == ("LUG-CHECK", 1)
    assert checks["attachments"] == (
        True,
        "build-record.json, ratings.csv, reference.csv, results.json, study.yaml",
        (),
    )
    assert checks["identity"][1] == "the attachments are of LUG-CHECK rev1, as the report says"
    assert checks["hashes"][1] == "3 attached input(s) have the SHA-256 printed in the report"
    assert checks["recompute"][1].startswith("recomputed with reportgen ")
    assert checks["signature"] == (True, "none: the report is not signed", ())
    # the headline figures: 2 panel figures, 2 per rater for 3 raters, 3 criterion checks
    assert (
        len(printed_figures(json.loads(attachments_of(report_a)["results.json"]))) == 2 + 2 * 3 + 3
    )
    r = _cli("verify", str(report_a))
    assert r.returncode == 0, r.stdout + r.stderr
    assert "LUG-CHECK rev1: GENUINE" in r.stdout


def test_edited_attachment(report_a: Path, tmp_path: Path) -> None:
    atts = attachments_of(report_a)
    ratings = atts["ratings.csv"].decode()
    assert "LUG-03,L1,1,B\n" in ratings
    atts["ratings.csv"] = ratings.replace("LUG-03,L1,1,B\n", "LUG-03,L1,1,G\n").encode()  # one byte
    bad = rewrite_attachments(report_a, tmp_path / "edited.pdf", atts)
    v = verify_report(bad)
    checks = _by_check(v)
    assert not v.ok
    assert checks["hashes"][0] is False
    [detail] = checks["hashes"][2]
    assert detail.startswith("edited attachment: ratings.csv has SHA-256 ")
    assert "but the report lists" in detail
    assert checks["recompute"][0] is False  # the changed rating changes L1's figures
    assert any(d.startswith("accuracy.L1.") for d in checks["recompute"][2])
    r = _cli("verify", str(bad))
    assert r.returncode == 1
    assert "FAIL  hashes" in r.stdout and "not genuine (failed: hashes, recompute" in r.stderr


def test_edited_results(report_a: Path, tmp_path: Path) -> None:
    atts = attachments_of(report_a)
    results = json.loads(atts["results.json"])
    old = results["reproducibility"]["fleiss_kappa"]["estimate"]
    results["reproducibility"]["fleiss_kappa"]["estimate"] = old + 0.05
    atts["results.json"] = (json.dumps(results, indent=2) + "\n").encode()
    v = verify_report(rewrite_attachments(report_a, tmp_path / "edited.pdf", atts))
    checks = _by_check(v)
    assert checks["hashes"][0] is True  # the inputs are untouched
    assert checks["recompute"][0] is False
    assert checks["recompute"][1] == (
        "edited results: 1 value(s) in results.json differ from a recomputation from the attached inputs"
    )
    assert checks["recompute"][2][0].startswith(
        f"reproducibility.fleiss_kappa.estimate: results.json has {old + 0.05}"
    )
    assert checks["printed"][0] is False
    assert any(
        d.startswith("reproducibility.fleiss_kappa: results.json gives ")
        for d in checks["printed"][2]
    )


def test_tiny_numeric_noise_is_tolerated_but_not_more() -> None:
    a = {"x": {"estimate": 0.5, "items": 12, "ok": True, "w": [1.0, None]}}
    assert (
        compare_results(
            a, {"x": {"estimate": 0.5 + 1e-13, "items": 12, "ok": True, "w": [1.0, None]}}
        )
        == []
    )
    assert compare_results(
        a, {"x": {"estimate": 0.5 + 1e-9, "items": 12, "ok": True, "w": [1.0, None]}}
    ) == [("x.estimate", 0.5, 0.5 + 1e-9)]
    assert compare_results(a, {"x": {"estimate": 0.5, "items": 12, "ok": 1, "w": [1.0, None]}}) == [
        ("x.ok", True, 1)
    ]
    assert compare_results(a, {"x": {"estimate": 0.5, "items": 12, "ok": True, "w": [1.0]}}) == [
        ("x.w (length)", 2, 1)
    ]
    assert compare_results(a, {"x": {"estimate": 0.5, "ok": True, "w": [1.0, None]}}) == [
        ("x.items", 12, "(absent)")
    ]
    assert compare_results({"n": 3}, {"n": 3.0}) == []


def test_stripped_attachments(report_a: Path, tmp_path: Path) -> None:
    v = verify_report(rewrite_attachments(report_a, tmp_path / "bare.pdf", {}))
    checks = _by_check(v)
    assert checks["attachments"][0] is False
    assert checks["attachments"][1].startswith(
        "the PDF carries no attachments: the study definition, the ratings and results.json were stripped"
    )
    r = _cli("verify", str(tmp_path / "bare.pdf"))
    assert r.returncode == 1 and "were stripped" in r.stdout

    atts = attachments_of(report_a)
    del atts["reference.csv"]
    checks = _by_check(verify_report(rewrite_attachments(report_a, tmp_path / "noref.pdf", atts)))
    assert checks["hashes"][0] is False
    assert checks["hashes"][2][0].startswith(
        "attachment stripped: the report lists an input with SHA-256 "
    )
    assert checks["recompute"] == (
        False,
        "cannot recompute: the reference file 'reference.csv' that the study definition names is not attached",
        (),
    )

    atts = attachments_of(report_a)
    del atts["results.json"]
    checks = _by_check(verify_report(rewrite_attachments(report_a, tmp_path / "nores.pdf", atts)))
    assert checks["attachments"][:2] == (False, "attachments stripped: results.json not attached")


def test_report_with_another_studys_data(report_a: Path, report_b: Path, tmp_path: Path) -> None:
    assert verify_report(report_b).ok
    swapped = rewrite_attachments(report_a, tmp_path / "swapped.pdf", attachments_of(report_b))
    v = verify_report(swapped)
    checks = _by_check(v)
    assert checks["identity"] == (
        False,
        "another study's data: the attachments are of LUG-AUDIT rev1, but the report is of LUG-CHECK rev1",
        (),
    )
    assert checks["hashes"][0] is False  # LUG-AUDIT's ratings differ from what LUG-CHECK lists
    assert (
        checks["recompute"][0] is True
    )  # B's data reproduce B's results: only the pairing is wrong
    assert checks["printed"][0] is False
    r = _cli("verify", str(swapped), "--json")
    assert r.returncode == 1
    out = json.loads(r.stdout)
    assert out["genuine"] is False and [f["check"] for f in out["findings"] if not f["ok"]] == [
        "identity",
        "hashes",
        "printed",
        "document",  # and the rebuild from B's attachments is not A's document
    ]


def test_not_a_pdf(tmp_path: Path, report_a: Path) -> None:
    (tmp_path / "x.pdf").write_text("hello")
    with pytest.raises(InputError, match="not a PDF file"):
        verify_report(tmp_path / "x.pdf")
    r = _cli("verify", str(tmp_path / "missing.pdf"))
    assert r.returncode == 2 and "does not exist" in r.stderr
    truncated = tmp_path / "cut.pdf"
    truncated.write_bytes(report_a.read_bytes()[:2000])
    r = _cli("verify", str(truncated))
    assert r.returncode == 1, r.stdout + r.stderr
    assert (
        "NOT GENUINE" in r.stdout
        and "FAIL  readable: the PDF is damaged and cannot be read" in r.stdout
    )


def test_printed_hashes_survive_wrapped_table_cells() -> None:
    from reportgen.verify import printed_hashes

    h1, h2 = "431675f2053f366f90855f9ca895c6c932a24cf582afecf8c149f3ead72f3e86", "ab" * 32
    text = (
        f"study study.yaml — 780 {h1[:44]}\n{h1[44:]}\nratings ratings.csv\n72 1 032 {h2}\n"
        "reference x.csv 12 123 cfd61cd90eb8\nCompleteness"  # a cut-off hash is not a hash
    )
    assert [h for _s, _e, h in printed_hashes(text)] == [h1, h2]
