"""``reportgen init``: templates that pass ``check`` once filled; never overwrites."""

from __future__ import annotations

import csv
import io
from pathlib import Path

import pytest
import yaml

from reportgen.study import TOP_KEYS, load_study


def fill(folder: Path, codes: list[str]) -> None:
    """Fill the blank ratings and references: reference cycles through the codes; each rater
    agrees with it except on every fifth item of their trial, where they give the next code."""
    ref_rows = list(csv.reader(io.StringIO((folder / "reference.csv").read_text())))
    refs = {row[0]: codes[n % len(codes)] for n, row in enumerate(ref_rows[1:])}
    (folder / "reference.csv").write_text(
        "item,reference\n" + "".join(f"{i},{c}\n" for i, c in refs.items())
    )
    rows = list(csv.reader(io.StringIO((folder / "ratings.csv").read_text())))
    assert rows[0] == ["item", "rater", "trial", "rating"]
    out = ["item,rater,trial,rating"]
    for n, (item, rater, trial, rating) in enumerate(rows[1:]):
        assert rating == ""
        k = codes.index(refs[item])
        if n % 5 == 0:
            k = (k + 1) % len(codes)
        out.append(f"{item},{rater},{trial},{codes[k]}")
    (folder / "ratings.csv").write_text("\n".join(out) + "\n")


def test_init_then_fill_then_check_passes(tmp_path: Path, run_cli) -> None:
    folder = tmp_path / "new"
    code, out, err = run_cli("init", folder)
    assert code == 0, err
    assert sorted(p.name for p in folder.iterdir()) == [
        "ratings.csv",
        "reference.csv",
        "study.yaml",
    ]
    assert "270 blank ratings" in out
    # unfilled: check refuses the blank cells
    code, _, err = run_cli("check", folder / "study.yaml")
    assert code == 2 and "blank rating cell" in err and "blank reference cell" in err
    study = load_study(folder / "study.yaml")
    assert study.id == "new" and study.scale == "ordinal"
    assert study.category_codes == ("G1", "G2", "G3") and study.rater_ids == ("R1", "R2", "R3")
    assert study.trials == 3
    fill(folder, list(study.category_codes))
    code, out, err = run_cli("check", folder / "study.yaml", "--strict")
    assert (code, err) == (0, ""), out + err
    assert "items       30" in out and "ratings     270 of 270 expected" in out


def test_init_options(tmp_path: Path, run_cli) -> None:
    folder = tmp_path / "bin"
    code, _, err = run_cli(
        "init",
        folder,
        "--scale",
        "binary",
        "--categories",
        "A=Accept,R=Reject",
        "--raters",
        "Ann,Bo",
        "--trials",
        "2",
        "--items",
        "40",
        "--id",
        "VIS-7",
    )
    assert code == 0, err
    study = load_study(folder / "study.yaml")
    assert (study.id, study.scale, study.defect_category, study.trials) == (
        "VIS-7",
        "binary",
        "R",
        2,
    )
    assert [(c.code, c.label) for c in study.categories] == [("A", "Accept"), ("R", "Reject")]
    assert study.rater_ids == ("Ann", "Bo")
    lines = (folder / "ratings.csv").read_text().splitlines()
    assert lines[:3] == ["item,rater,trial,rating", "001,Ann,1,", "002,Ann,1,"]
    assert len(lines) == 1 + 40 * 2 * 2
    assert (folder / "reference.csv").read_text().splitlines()[:2] == ["item,reference", "001,"]
    fill(folder, ["A", "R"])
    assert run_cli("check", folder / "study.yaml")[0] == 0


def test_init_yaml_mentions_every_key_with_a_comment(tmp_path: Path, run_cli) -> None:
    run_cli("init", tmp_path / "s")
    text = (tmp_path / "s" / "study.yaml").read_text()
    for key in TOP_KEYS:
        line = next((ln for ln in text.splitlines() if ln.lstrip("# ").startswith(f"{key}:")), None)
        assert line is not None, key
    for line in text.splitlines():
        if (
            line
            and not line.startswith(("#", " ", "  -"))
            and ":" in line
            and not line.rstrip().endswith(":")
        ):
            assert "#" in line, f"no comment: {line}"
    assert isinstance(yaml.safe_load(text), dict)


def test_init_never_overwrites(tmp_path: Path, run_cli) -> None:
    folder = tmp_path / "s"
    folder.mkdir()
    (folder / "ratings.csv").write_text("mine\n")
    code, _, err = run_cli("init", folder)
    assert code == 5 and "already exist" in err
    assert (folder / "ratings.csv").read_text() == "mine\n"
    assert sorted(p.name for p in folder.iterdir()) == ["ratings.csv"]


@pytest.mark.parametrize(
    ("args", "fragment"),
    [
        (["--scale", "binary", "--categories", "A,B,C"], "exactly 2 categories"),
        (["--categories", "A,A"], "must differ"),
        (["--categories", "A"], "at least 2"),
        (["--raters", "R1,,R2"], "without empty entries"),
        (["--raters", "R1,R1"], "must differ"),
        (["--trials", "0"], "0"),
        (["--scale", "interval"], "interval"),
        (["--id", "bad id"], "letters, digits"),
    ],
)
def test_init_bad_options(tmp_path: Path, run_cli, args: list[str], fragment: str) -> None:
    code, _, err = run_cli("init", tmp_path / "x", *args)
    assert code == 2 and fragment in err
    assert not (tmp_path / "x").exists()
