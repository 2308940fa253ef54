"""Study definition loader: strict YAML, positions, unknown keys, types, cross-field rules."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest

from reportgen.errors import InputError
from reportgen.study import load_study
from reportgen.yamlio import MAX_YAML_BYTES, format_key

BASE = """\
study:
  id: T-1
  title: Test
scale: ordinal
categories:
  - {code: P, label: Premium}
  - {code: S, label: Standard}
  - {code: X, label: Scrap}
raters: [R1, R2]
trials: 2
ratings: ratings.csv
"""


def write(tmp_path: Path, text: str, *, ratings: bool = True) -> Path:
    if ratings:
        (tmp_path / "ratings.csv").write_text("item,rater,trial,rating\n")
    p = tmp_path / "study.yaml"
    p.write_text(text, encoding="utf-8")
    return p


def problems(path: Path) -> list[str]:
    with pytest.raises(InputError) as info:
        load_study(path)
    return [p.format() for p in info.value.problems()]


def test_valid_study_loads_with_defaults(make_study) -> None:
    study = load_study(make_study())
    assert study.id == "TEST-01"
    assert study.scale == "ordinal"
    assert study.category_codes == ("P", "S", "X")
    assert study.rater_ids == ("R1", "R2", "R3")
    assert study.trials == 2
    assert study.ratings_path.is_absolute() and study.ratings_path.name == "ratings.csv"
    assert study.reference_path is not None and study.reference_path.name == "reference.csv"
    assert (study.revision, study.missing, study.confidence, study.proportion_interval) == (
        1,
        "refuse",
        0.95,
        "clopper-pearson",
    )
    assert (
        study.bootstrap_resamples,
        study.bootstrap_seed,
        study.weights,
        study.target_half_width,
    ) == (2000, 1, "linear", 0.10)
    assert study.criteria is None and study.defect_category is None


def test_every_key_read(tmp_path: Path) -> None:
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "r.xlsx").write_bytes(b"")
    (tmp_path / "ref.csv").write_text("item,reference\n")
    (tmp_path / "key.csv").write_text("label,item,trial\n")
    (tmp_path / "tpl").mkdir()
    text = """\
study:
  id: FIN.2_a
  title: "Finish"
  purpose: Qualify
  characteristic: Finish
  station: Line 3
  revision: 3
  date: 2026-11-20
  safety_related: yes
scale: binary
categories:
  - {code: G, label: Good, value: 0, description: "no marks"}
  - {code: B, label: Bad, value: 1}
defect_category: B
raters:
  - {id: R1, name: "A. Example"}
trials: 3
ratings: {file: data/r.xlsx, sheet: Sheet 2}
reference: ref.csv
key: key.csv
missing: allow
confidence: 0.9
interval: wilson
bootstrap: {resamples: 0, seed: 42}
weights: [[1, 0.5], [0.5, 1]]
target_half_width: 0.05
criteria: {source: QP-12, rules: [{measure: reproducibility.fleiss_kappa, pass: 0.75}]}
certification: {valid_months: 12}
signoff: {prepared_by: Ann, reviewed_by: Bo, approved_by: Cy}
report: {paper: letter, templates: tpl}
plan: {seed: 7, gap_days: 7}
"""
    study = load_study(write(tmp_path, text, ratings=False))
    assert study.id == "FIN.2_a" and study.revision == 3 and study.date == dt.date(2026, 11, 20)
    assert study.safety_related is True
    assert study.categories[0].value == 0.0 and study.categories[0].description == "no marks"
    assert study.defect_category == "B"
    assert study.raters[0].name == "A. Example"
    assert study.ratings_path == tmp_path / "data" / "r.xlsx" and study.ratings_sheet == "Sheet 2"
    assert study.key_path == tmp_path / "key.csv"
    assert (
        study.missing == "allow"
        and study.confidence == 0.9
        and study.proportion_interval == "wilson"
    )
    assert (study.bootstrap_resamples, study.bootstrap_seed) == (0, 42)
    assert study.weights == ((1.0, 0.5), (0.5, 1.0))
    assert (
        study.signoff.reviewed_by == "Bo"
        and study.paper == "letter"
        and study.templates_path == tmp_path / "tpl"
    )
    assert study.criteria["rules"][0]["pass"] == 0.75
    assert study.plan == {"seed": 7, "gap_days": 7}
    # positions are kept for the raw blocks, for verdict.py and plan.py
    loc = study.locate("criteria", "rules", 0, "measure")
    assert (loc.line, loc.key) == (27, "criteria.rules[0].measure")
    assert study.locate("certification", "valid_months").line == 28
    assert study.locate("criteria", "rules", 5).line == 27  # falls back to the nearest parent


def test_codes_and_ids_are_text_as_written(tmp_path: Path) -> None:
    text = BASE.replace(
        "  - {code: P, label: Premium}\n  - {code: S, label: Standard}\n  - {code: X, label: Scrap}",
        "  - {code: 1, label: One}\n  - {code: No, label: Negative}\n  - {code: 1.0, label: Float}\n  - 0012\n  - '07'",
    ).replace("raters: [R1, R2]", "raters: [1, yes, 0x1F]")
    study = load_study(write(tmp_path, text))
    assert study.category_codes == ("1", "No", "1.0", "0012", "07")
    assert study.categories[3].label == "0012"
    assert study.rater_ids == ("1", "yes", "0x1F")


@pytest.mark.parametrize(
    ("text", "fragments"),
    [
        ("a: &x 1\nb: *x\n", ["study.yaml:2:4:", "aliases (*x) are not allowed"]),
        (
            "study:\n  id: A\n  title: T\n  id: B\n",
            ["study.yaml:4:3:", "study.id", "duplicate key 'id' (first on line 2)"],
        ),
        ("study:\n\tid: A\n", ["study.yaml:2:1:", "'\\t'"]),
        ("study: [a, b\nscale: x\n", ["study.yaml:2:", "expected ',' or ']'"]),
        ("", ["study.yaml:", "is empty"]),
        ("- a\n- b\n", ["study.yaml:1:1:", "must be a mapping"]),
        ("<<: {a: 1}\n", ["study.yaml:1:1:", "unknown key '<<'"]),
    ],
    ids=["alias", "duplicate-key", "tab", "syntax", "empty", "not-mapping", "merge-key"],
)
def test_yaml_errors(tmp_path: Path, text: str, fragments: list[str]) -> None:
    msg = "\n".join(problems(write(tmp_path, text)))
    for f in fragments:
        assert f in msg, msg


def test_size_cap(tmp_path: Path) -> None:
    p = write(tmp_path, BASE + "#" * (MAX_YAML_BYTES + 1) + "\n")
    msg = "\n".join(problems(p))
    assert "limit is 1,000,000" in msg


def test_not_utf8(tmp_path: Path) -> None:
    p = tmp_path / "study.yaml"
    p.write_bytes(BASE.encode() + b"# caf\xe9\n")
    assert "study.yaml:12: error: not UTF-8 text (byte 0xe9)" in problems(p)[0]


def test_missing_file(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.chdir(tmp_path)
    assert problems(Path("nope.yaml")) == ["nope.yaml: error: study definition not found"]


@pytest.mark.parametrize(
    ("edit", "fragments"),
    [
        # unknown keys, with did-you-mean
        (
            ("trials: 2", "trails: 2"),
            ["study.yaml:10:1:", "trails: unknown key 'trails'", "did you mean 'trials'?"],
        ),
        (
            ("  title: Test", "  title: Test\n  titel: X"),
            ["study.yaml:4:3:", "study.titel: unknown key", "did you mean 'title'?"],
        ),
        (
            ("{code: S, label: Standard}", "{code: S, lable: Standard}"),
            ["study.yaml:7:15:", "categories[1].lable", "did you mean 'label'?"],
        ),
        # required keys
        (("  title: Test\n", ""), ["study.title: required key 'title' is missing in study"]),
        (("scale: ordinal\n", ""), ["required key 'scale' is missing"]),
        (("ratings: ratings.csv\n", ""), ["required key 'ratings' is missing"]),
        (("trials: 2\n", ""), ["required key 'trials' is missing"]),
        # types with positions
        (
            ("trials: 2", "trials: two"),
            ["study.yaml:10:9:", "trials: must be a whole number, got 'two'"],
        ),
        (("trials: 2", "trials: 2.5"), ["trials: must be a whole number, got '2.5'"]),
        (("trials: 2", "trials: 0"), ["study.yaml:10:9:", "trials: must be at least 1, got 0"]),
        (
            ("scale: ordinal", "scale: ordinl"),
            [
                "study.yaml:4:8:",
                "scale: must be one of binary, nominal, ordinal",
                "did you mean 'ordinal'?",
            ],
        ),
        (("  id: T-1", "  id: 'T 1/x'"), ["study.yaml:2:7:", "study.id:", "letters, digits"]),
        (("  id: T-1", "  id: T-1\n  revision: 0"), ["study.revision: must be at least 1"]),
        (
            ("  id: T-1", "  id: T-1\n  date: 20.11.2026"),
            ["study.date: must be a date written YYYY-MM-DD"],
        ),
        (
            ("  id: T-1", "  id: T-1\n  safety_related: maybe"),
            ["study.safety_related: must be true or false, got 'maybe'"],
        ),
        (
            ("trials: 2", "trials: 2\nconfidence: 1.5"),
            ["study.yaml:11:13:", "confidence: must be between 0.5 and 1"],
        ),
        (("trials: 2", "trials: 2\nconfidence: 0.5"), ["confidence: must be between 0.5 and 1"]),
        (
            ("trials: 2", "trials: 2\nconfidence: high"),
            ["confidence: must be a number, got 'high'"],
        ),
        (("trials: 2", "trials: 2\nmissing: skip"), ["missing: must be one of refuse, allow"]),
        (
            ("trials: 2", "trials: 2\ninterval: wald"),
            ["interval: must be one of clopper-pearson, wilson"],
        ),
        (
            ("trials: 2", "trials: 2\nbootstrap: {resamples: -1}"),
            ["bootstrap.resamples: must be at least 0"],
        ),
        (
            ("trials: 2", "trials: 2\nbootstrap: {resample: 10}"),
            ["bootstrap.resample: unknown key", "did you mean 'resamples'?"],
        ),
        (
            ("trials: 2", "trials: 2\ntarget_half_width: 0.7"),
            ["target_half_width: must be between 0 and 0.5"],
        ),
        (
            ("trials: 2", "trials: 2\nreport: {paper: A3}"),
            ["report.paper: must be one of A4, letter"],
        ),
        (("raters: [R1, R2]", "raters: R1"), ["raters: must be a list of raters"]),
        (
            ("raters: [R1, R2]", "raters: []"),
            ["raters: must be a list of raters, got an empty list"],
        ),
        # cross-field rules
        (
            ("{code: S, label: Standard}", "{code: P, label: Standard}"),
            [
                "study.yaml:7:12:",
                "categories[1].code: duplicate category code 'P' (first at categories[0])",
            ],
        ),
        (
            ("raters: [R1, R2]", "raters: [R1, R1]"),
            ["study.yaml:9:14:", "raters[1]: duplicate rater id 'R1'"],
        ),
        (
            ("raters: [R1, R2]", "raters: [{id: R1}, {id: R1}]"),
            ["raters[1].id: duplicate rater id 'R1'"],
        ),
        (
            ("raters: [R1, R2]", "raters: [R1, R/2]"),
            ["raters[1]: rater id 'R/2' must not contain '/'"],
        ),
        (
            ("scale: ordinal", "scale: ordinal\ndefect_category: Q"),
            ["defect_category: 'Q' is not a declared category code (P, S, X)"],
        ),
        (
            ("scale: ordinal", "scale: binary"),
            [
                "categories: a binary study has exactly 2 categories, got 3",
                "defect_category: required for a binary study",
            ],
        ),
        (
            ("  - {code: S, label: Standard}\n  - {code: X, label: Scrap}\n", ""),
            ["categories: at least 2 categories are needed, got 1"],
        ),
        (
            ("{code: S, label: Standard}", "{code: ' S', label: Standard}"),
            ["code ' S' starts or ends with spaces"],
        ),
        (("trials: 2", "trials: 2\nweights: cubic"), ["weights: must be one of linear, quadratic"]),
        (
            ("trials: 2", "trials: 2\nweights: [[1, 0], [0, 1]]"),
            ["weights: a weights matrix needs 3 rows (one per category), got 2"],
        ),
        (
            ("trials: 2", "trials: 2\nweights: [[1, 0.5, 0], [0.5, 1], [0, 0.5, 1]]"),
            ["weights[1]: row 2 must be a list of 3 numbers"],
        ),
        (
            ("trials: 2", "trials: 2\nweights: [[1, 0.5, 0], [0.5, 0.9, 0.5], [0, 0.5, 1]]"),
            ["weights[1][1]: the diagonal must be 1"],
        ),
        (
            ("trials: 2", "trials: 2\nweights: [[1, 0.5, 0], [0.4, 1, 0.5], [0, 0.5, 1]]"),
            ["weights[1][0]: the matrix must be symmetric"],
        ),
        (
            ("trials: 2", "trials: 2\nweights: [[1, 1.5, 0], [1.5, 1, 0.5], [0, 0.5, 1]]"),
            ["weights[0][1]: weights lie between 0 and 1, got 1.5"],
        ),
        # referenced files
        (
            ("ratings: ratings.csv", "ratings: nothere.csv"),
            ["study.yaml:11:10:", "ratings: ratings file not found:", "nothere.csv"],
        ),
        (
            ("ratings: ratings.csv", "ratings: ratings.csv\nreference: ref/none.csv"),
            ["reference: reference file not found:", "ref/none.csv"],
        ),
        (
            ("ratings: ratings.csv", "ratings: ratings.csv\nkey: key.csv"),
            ["key: key file not found:", "key.csv"],
        ),
        (
            ("ratings: ratings.csv", "ratings: {file: ratings.csv, sheet: S1}"),
            ["ratings.sheet: a sheet name applies only to .xlsx"],
        ),
        (
            ("ratings: ratings.csv", "ratings: {sheet: S1}"),
            ["required key 'file' is missing in ratings"],
        ),
        (
            ("ratings: ratings.csv", "ratings: study.yaml"),
            ["ratings must be a .csv, .tsv, .txt or .xlsx file"],
        ),
        (
            ("ratings: ratings.csv", "ratings: ratings.csv\nreport: {templates: tpl}"),
            ["report.templates: templates folder not found"],
        ),
    ],
)
def test_definition_problems(tmp_path: Path, edit: tuple[str, str], fragments: list[str]) -> None:
    old, new = edit
    assert old in BASE
    msg = "\n".join(problems(write(tmp_path, BASE.replace(old, new, 1))))
    for f in fragments:
        assert f in msg, msg


def test_all_problems_at_once(tmp_path: Path) -> None:
    text = BASE.replace("trials: 2", "trials: 0\nconfidence: 2\nmissng: allow").replace(
        "scale: ordinal", "scale: odd"
    )
    found = problems(write(tmp_path, text))
    assert len(found) == 4, found
    assert [f.split(":")[1] for f in found] == ["4", "10", "11", "12"]


def test_format_key() -> None:
    assert format_key(("raters", 2, "id")) == "raters[2].id"
    assert format_key(("weights", 0, 1)) == "weights[0][1]"
    assert format_key(()) == ""
