"""Regression tests for `verify` on genuine reports whose study definitions name their inputs in
ways `build` accepts: files above the study folder, absolute paths, and two inputs with the same
file name.  Each used to be reported NOT GENUINE.

Study data: the invented cable-lug crimp check of ``tests/_built.py``.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from _built import build, study_files

from reportgen.analysis import analyse
from reportgen.ratings import load_ratings
from reportgen.study import load_study
from reportgen.verify import compare_results, recompute, verify_report


def _inputs(tmp_path: Path) -> tuple[str, bytes, bytes]:
    study = study_files(tmp_path / "orig")
    return (
        study.read_text(encoding="utf-8"),
        (study.parent / "ratings.csv").read_bytes(),
        (study.parent / "reference.csv").read_bytes(),
    )


def _expected(tmp_path: Path) -> dict:
    study = load_study(tmp_path / "orig" / "study.yaml")
    return analyse(study, load_ratings(study))


def _same_figures(got: dict, want: dict) -> None:
    for section in ("repeatability", "accuracy", "reproducibility", "panel_accuracy"):
        assert compare_results(want[section], got[section]) == [], section


def test_recompute_follows_inputs_above_the_study_folder(tmp_path: Path) -> None:
    """Defect: `ratings: ../data/ratings.csv` was refused as an 'outside path'."""
    text, ratings, reference = _inputs(tmp_path)
    text = text.replace("ratings: ratings.csv", "ratings: ../../data/ratings.csv").replace(
        "reference: reference.csv", "reference: ../ref/reference.csv"
    )
    got, study = recompute(
        {
            "study.yaml": text.encode(),
            "ratings.csv": ratings,
            "reference.csv": reference,
            "results.json": b"{}",
        },
        "study.yaml",
    )
    assert study.ratings_path.name == "ratings.csv"
    _same_figures(got, _expected(tmp_path))


def test_recompute_reads_the_attached_copy_of_an_absolute_path(tmp_path: Path) -> None:
    """Defect: an absolute ratings path was refused; it must never read the file on this machine."""
    text, ratings, reference = _inputs(tmp_path)
    decoy = tmp_path / "elsewhere" / "ratings.csv"
    decoy.parent.mkdir()
    decoy.write_text(
        "item,rater,trial,rating\nX,L1,1,G\n", encoding="utf-8"
    )  # not the attached data
    text = text.replace("ratings: ratings.csv", f'ratings: "{decoy}"   # on the build machine')
    got, study = recompute(
        {"study.yaml": text.encode(), "ratings.csv": ratings, "reference.csv": reference},
        "study.yaml",
    )
    assert study.ratings_path != decoy.resolve()
    _same_figures(got, _expected(tmp_path))


def test_recompute_tells_apart_two_inputs_with_one_file_name(tmp_path: Path) -> None:
    """Defect: ratings `a/data.csv` and reference `b/data.csv` are attached as data.csv and
    data-2.csv; verify matched by base name and loaded the ratings as the reference."""
    text, ratings, reference = _inputs(tmp_path)
    text = text.replace("ratings: ratings.csv", "ratings: a/data.csv").replace(
        "reference: reference.csv", "reference: b/data.csv"
    )
    got, _ = recompute(
        {"study.yaml": text.encode(), "data.csv": ratings, "data-2.csv": reference}, "study.yaml"
    )
    _same_figures(got, _expected(tmp_path))


@pytest.mark.slow
@pytest.mark.render
def test_built_report_with_inputs_above_its_folder_is_genuine(tmp_path: Path) -> None:
    study = study_files(tmp_path / "defs")
    data = tmp_path / "data"
    data.mkdir()
    for name in ("ratings.csv", "reference.csv"):
        (study.parent / name).rename(data / name)
    text = study.read_text(encoding="utf-8")
    study.write_text(
        text.replace("ratings: ratings.csv", "ratings: ../data/ratings.csv").replace(
            "reference: reference.csv", "reference: ../data/reference.csv"
        ),
        encoding="utf-8",
    )
    folder = build(study, tmp_path / "out")
    v = verify_report(folder / "LUG-CHECK-rev1.pdf")
    assert v.ok, v.format()
    assert not v.draft


@pytest.mark.slow
@pytest.mark.render
def test_a_draft_is_said_to_be_a_draft(tmp_path: Path) -> None:
    """Defect: a report rebuilt with --replace verified as 'GENUINE — every check holds' with no
    word that it is a DRAFT, not a released revision."""
    from _built import GENERATED_AT

    from reportgen.render.build import build_report

    study = load_study(study_files(tmp_path / "study"))
    build_report(study, output_dir=tmp_path / "out", generated_at=GENERATED_AT, pdf=False)
    folder = build_report(
        study, output_dir=tmp_path / "out", generated_at=GENERATED_AT, replace=True
    )
    v = verify_report(folder / "LUG-CHECK-rev1.pdf")
    assert v.ok and v.draft and v.as_dict()["draft"] is True
    assert (
        v.format()
        .splitlines()[0]
        .endswith(
            "GENUINE — every check holds (a DRAFT built with --replace, not a released revision)"
        )
    )
