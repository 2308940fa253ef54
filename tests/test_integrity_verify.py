"""``verify`` proves the whole document: each attack is performed on a real built report.

The attacks are those a hostile user tried (issue 13): page content edited with common PDF tools
(uncompress, replace the text operators, recompress), an incremental update that adds an opaque
annotation over the verdict, a renamed file, a build record that lies about the state.  Each one
must be caught with its own message; an untouched report, and a signed one, stay GENUINE.
"""

from __future__ import annotations

import io
import json
import re
import shutil
from pathlib import Path

import pytest
from _built import attachments_of, built_report, rewrite_attachments, self_signed_p12

from reportgen.pdftail import appended_problems, original_end, revision_ends
from reportgen.verify import verify_report

pytestmark = [
    pytest.mark.slow,
    pytest.mark.render,
    pytest.mark.filterwarnings(
        "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
    ),
]


@pytest.fixture(scope="module")
def report_a(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return built_report(tmp_path_factory, "a")


def _checks(v) -> dict[str, tuple[bool, str, tuple[str, ...]]]:  # type: ignore[no-untyped-def]
    return {f.check: (f.ok, f.message, f.details) for f in v.findings}


def _edit_page_text(src: Path, dst: Path) -> None:
    """Uncompress page 1, replace one text-showing operator by another one's, recompress."""
    import pypdf
    from pypdf.generic import ContentStream, NameObject

    writer = pypdf.PdfWriter(clone_from=pypdf.PdfReader(str(src)))
    page = writer.pages[0]
    content = ContentStream(page.get_contents(), writer)
    shows = [i for i, (_ops, op) in enumerate(content.operations) if op == b"TJ"]
    assert len(shows) > 10
    first, last = shows[2], shows[-1]
    content.operations[first] = content.operations[last]  # the text of one run now says another's
    page[NameObject("/Contents")] = writer._add_object(content)
    page.compress_content_streams()
    buf = io.BytesIO()
    writer.write(buf)
    dst.write_bytes(buf.getvalue())


def _append_overlay(src: Path, dst: Path) -> None:
    """An incremental update with an opaque annotation reading PASS over the header."""
    import pypdf
    from pypdf.annotations import FreeText

    writer = pypdf.PdfWriter(str(src), incremental=True)
    note = FreeText(
        text="PASS — all inspectors certified",
        rect=(50, 700, 560, 780),
        font_size="20pt",
        background_color="ffffff",
    )
    writer.add_annotation(page_number=0, annotation=note)
    buf = io.BytesIO()
    writer.write(buf)
    dst.write_bytes(buf.getvalue())


def test_untouched_report_is_proven_byte_for_byte(report_a: Path) -> None:
    v = verify_report(report_a)
    assert v.ok, v.format()
    assert (v.state, v.as_dict()["state"], v.draft) == ("release", "release", False)
    ok, msg, _ = _checks(v)["document"]
    assert ok
    size = report_a.stat().st_size
    assert msg == (
        f"rebuilt from its attachments and build record: the {size:,} bytes of the report as "
        "built are identical to the rebuild"
    )
    assert "appended" not in _checks(v)


def test_edited_page_text_is_caught(report_a: Path, tmp_path: Path) -> None:
    """Attack 1: the page's text operators replaced and recompressed (was GENUINE before)."""
    bad = tmp_path / report_a.name
    _edit_page_text(report_a, bad)
    v = verify_report(bad)
    assert not v.ok
    ok, msg, details = _checks(v)["document"]
    assert not ok
    assert msg.startswith("edited report: the report as built is not what its attachments build")
    assert any(d.startswith("page 1: expected ") for d in details), details
    # every other check still passes: only the whole-document comparison sees this edit
    assert all(f.ok for f in v.findings if f.check not in ("document",)), v.format()


def test_rewritten_file_with_same_text_is_caught(report_a: Path, tmp_path: Path) -> None:
    """Recompressing alone (no visible change) still differs from what this software builds."""
    import pypdf

    writer = pypdf.PdfWriter(clone_from=pypdf.PdfReader(str(report_a)))
    bad = tmp_path / report_a.name
    with open(bad, "wb") as fh:
        writer.write(fh)
    v = verify_report(bad)
    ok, msg, details = _checks(v)["document"]
    assert not ok and msg.startswith("edited report:")
    assert details[0].startswith("the text of every page agrees, but other content")


def test_appended_overlay_makes_an_unsigned_report_not_genuine(
    report_a: Path, tmp_path: Path
) -> None:
    """Attack 2: an incremental update with an annotation over the verdict (was GENUINE)."""
    bad = tmp_path / report_a.name
    _append_overlay(report_a, bad)
    data = bad.read_bytes()
    assert data.startswith(report_a.read_bytes())  # a true incremental update
    v = verify_report(bad)
    assert not v.ok
    checks = _checks(v)
    assert checks["document"][0] is True  # the original bytes are untouched
    ok, msg, details = checks["appended"]
    assert not ok
    assert msg == "content was added to the report after it was built"
    assert re.match(
        r"\d+ byte\(s\) were appended after the report as built \(1 incremental update\(s\) with "
        r"annotations.*\); an unsigned report has nothing appended",
        details[0],
    ), details


def test_signed_report_allows_only_the_signature_update(report_a: Path, tmp_path: Path) -> None:
    from reportgen.sign import sign_report

    p12, pem = self_signed_p12(tmp_path)
    signed = sign_report(report_a, key=p12, passphrase=b"s3cret", output=tmp_path / "s.pdf")
    v = verify_report(signed, trust=(pem,))
    assert v.ok, v.format()
    assert _checks(v)["appended"] == (
        True,
        "only signature updates follow the report as built",
        (),
    )
    # an overlay appended after signing: the signature no longer covers the file
    bad = tmp_path / "s-overlay.pdf"
    _append_overlay(signed, bad)
    v2 = verify_report(bad, trust=(pem,))
    assert not v2.ok
    ok, msg, details = _checks(v2)["appended"]
    assert not ok and msg.endswith("that no signature covers")
    assert any("not covered by a signature" in d for d in details), details


def test_overlay_signed_over_is_still_refused(report_a: Path, tmp_path: Path) -> None:
    """An overlay added first and then signed: the signature covers it, but it is not allowed."""
    from reportgen.sign import sign_report

    p12, _pem = self_signed_p12(tmp_path)
    overlay = tmp_path / "overlay.pdf"
    _append_overlay(report_a, overlay)
    data = overlay.read_bytes()
    end = original_end(data)
    assert appended_problems(data, end, signed=False)
    with pytest.raises(Exception, match="NOT GENUINE"):
        sign_report(overlay, key=p12, passphrase=b"s3cret", output=tmp_path / "o-s.pdf")


def test_revision_ends_and_original_end() -> None:
    data = b"%PDF-1.7\n...%%EOF\nmore%%EOF\r\n"
    assert revision_ends(data) == [18, 29]
    assert original_end(data) == 18
    assert appended_problems(data[:18], 18, signed=False) == []
    assert appended_problems(data, 18, signed=False)[0].startswith("11 byte(s) were appended")


def test_build_record_lying_about_the_state(report_a: Path, tmp_path: Path) -> None:
    atts = attachments_of(report_a)
    rec = json.loads(atts["build-record.json"])
    assert rec["state"] == "release"
    rec["state"] = "draft"
    atts["build-record.json"] = json.dumps(rec).encode()
    bad = rewrite_attachments(report_a, tmp_path / report_a.name, atts)
    v = verify_report(bad)
    ok, msg, _ = _checks(v)["document"]
    assert not ok
    assert msg == (
        "the PDF's document information says the state is release, its build record says draft"
    )


def test_stripped_build_record(report_a: Path, tmp_path: Path) -> None:
    atts = attachments_of(report_a)
    del atts["build-record.json"]
    bad = rewrite_attachments(report_a, tmp_path / report_a.name, atts)
    v = verify_report(bad)
    ok, msg, _ = _checks(v)["document"]
    assert not ok
    assert msg.startswith("the PDF carries no build record (build-record.json)")


def test_renamed_file_is_named(report_a: Path, tmp_path: Path) -> None:
    """A PDF of one study renamed as another's: verify says the name does not match."""
    other = tmp_path / "LUG-AUDIT-rev1.pdf"
    shutil.copyfile(report_a, other)
    v = verify_report(other)
    assert v.ok  # the content is genuine …
    assert v.notes == [
        "the file name LUG-AUDIT-rev1.pdf does not match the study it holds "
        "(LUG-CHECK revision 1, built as LUG-CHECK-rev1.pdf)"
    ]
    assert "note  the file name LUG-AUDIT-rev1.pdf does not match" in v.format()
    # a signed copy keeps the name with a suffix: no note
    signed_name = tmp_path / "LUG-CHECK-rev1-signed.pdf"
    shutil.copyfile(report_a, signed_name)
    assert verify_report(signed_name).notes == []


def test_huge_bootstrap_in_the_attached_study_is_refused_quickly(
    report_a: Path, tmp_path: Path
) -> None:
    """An attached study asking 10^8 resamples drove verify to 3-4 GB; now it is refused."""
    atts = attachments_of(report_a)
    atts["study.yaml"] = atts["study.yaml"].replace(
        b"bootstrap: {resamples: 0, seed: 3}", b"bootstrap: {resamples: 100000000, seed: 3}"
    )
    bad = rewrite_attachments(report_a, tmp_path / report_a.name, atts)
    v = verify_report(bad)
    ok, msg, details = _checks(v)["recompute"]
    assert not ok and msg == "the attached inputs cannot be loaded:"
    assert any("must be at most 100,000, got 100,000,000" in d for d in details), details
    assert v.seconds < 30


def test_build_archive_verify_sign_verify_cycle(report_a: Path, tmp_path: Path) -> None:
    """Done when: build -> archive -> verify -> sign -> verify stays GENUINE and byte-identical."""
    from _built import GENERATED_AT, build, study_files

    from reportgen.archive import archive_revision
    from reportgen.sign import sign_report

    # a second build of the same inputs at the same time is byte-identical
    again = build(study_files(tmp_path / "study"), tmp_path / "output")
    assert (again / report_a.name).read_bytes() == report_a.read_bytes()
    assert GENERATED_AT.year == 2026
    # sign a copy into the revision folder (signed copies are archived with the revision)
    p12, pem = self_signed_p12(tmp_path)
    signed = sign_report(
        again / report_a.name,
        key=p12,
        passphrase=b"s3cret",
        output=again / report_a.name.replace(".pdf", "-signed.pdf"),
    )
    entry = archive_revision(again, archive_dir=tmp_path / "archive")
    assert signed.name in entry.files
    archived = tmp_path / "archive" / entry.folder / report_a.name
    assert archived.read_bytes() == report_a.read_bytes()
    v = verify_report(archived)
    assert v.ok and _checks(v)["document"][0], v.format()
    resigned = sign_report(archived, key=p12, passphrase=b"s3cret", output=tmp_path / "s.pdf")
    assert resigned.read_bytes().startswith(report_a.read_bytes())
    v2 = verify_report(resigned, trust=(pem,))
    assert v2.ok, v2.format()
    v3 = verify_report(tmp_path / "archive" / entry.folder / signed.name, trust=(pem,))
    assert v3.ok, v3.format()
