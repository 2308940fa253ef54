"""Size words from named published scales only (issue 12, part 3): reportgen.sizewords.

Cut-points checked against the sources (the page numbers are from memory):
- Landis, J. R., Koch, G. G. (1977), Biometrics 33, 159-174, the table of kappa statistic and
  strength of agreement (p. 165): < 0.00 poor, 0.00-0.20 slight, 0.21-0.40 fair, 0.41-0.60
  moderate, 0.61-0.80 substantial, 0.81-1.00 almost perfect.
- Fleiss, J. L. (1981), Statistical Methods for Rates and Proportions, 2nd ed., p. 218: below
  0.40 poor, 0.40 to 0.75 fair to good, above 0.75 excellent.
- Krippendorff, K. (2004), Content Analysis, 2nd ed., p. 241: rely on alpha >= 0.800; 0.667 to
  0.800 for tentative conclusions only.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from reportgen.render.readings import SIZE_SCALE, read_measure
from reportgen.sizewords import SCALES, size_word, statement

STUDIES = Path(__file__).resolve().parents[1] / "studies"


@pytest.mark.parametrize(
    "value,word",
    [  # Landis & Koch (1977), p. 165 (page from memory)
        (-0.01, "poor"),
        (0.0, "slight"),
        (0.20, "slight"),
        (0.21, "fair"),
        (0.40, "fair"),
        (0.41, "moderate"),
        (0.60, "moderate"),
        (0.61, "substantial"),
        (0.80, "substantial"),
        (0.81, "almost perfect"),
        (1.0, "almost perfect"),
    ],
)
def test_landis_koch_1977_cut_points(value: float, word: str) -> None:
    assert size_word(value, "cohen_kappa", "landis-koch-1977") == word
    assert size_word(value, "fleiss_kappa") == word  # the default scale


@pytest.mark.parametrize(
    "value,word",
    [  # Fleiss (1981), p. 218 (page from memory)
        (0.39, "poor"),
        (0.40, "fair to good"),
        (0.75, "fair to good"),
        (0.76, "excellent"),
    ],
)
def test_fleiss_1981_cut_points(value: float, word: str) -> None:
    assert size_word(value, "fleiss_kappa", "fleiss-1981") == word


@pytest.mark.parametrize(
    "value,word",
    [  # Krippendorff (2004), p. 241 (page from memory)
        (0.666, "too low to rely on"),
        (0.667, "tentative conclusions only"),
        (0.799, "tentative conclusions only"),
        (0.800, "reliable"),
    ],
)
def test_krippendorff_2004_levels_for_alpha_whatever_the_kappa_scale(
    value: float, word: str
) -> None:
    for kappa_scale in ("landis-koch-1977", "fleiss-1981"):
        assert size_word(value, "krippendorff_alpha", kappa_scale) == word


def test_no_words_for_coefficients_without_a_published_scale() -> None:
    for key in ("kendall_w", "kendall_tau_b", "mean_offset"):
        assert size_word(0.9, key) is None
    token = SIZE_SCALE.set("landis-koch-1977")
    try:
        m = {"estimate": 0.9, "ci_low": 0.8, "ci_high": 0.95, "items": 30}
        assert "no size word" in read_measure(m, "kendall_w")
        assert read_measure(m, "cohen_kappa").startswith("almost perfect (Landis & Koch 1977)")
        SIZE_SCALE.set("fleiss-1981")
        assert read_measure(m, "cohen_kappa").startswith("excellent (Fleiss 1981)")
        assert read_measure(m, "krippendorff_alpha").startswith("reliable (Krippendorff 2004)")
    finally:
        SIZE_SCALE.reset(token)


def test_statement_prints_cut_points_and_source_for_the_families_present() -> None:
    both = statement("fleiss-1981", {"fleiss_kappa", "krippendorff_alpha", "kendall_w"})
    assert [s["scale"] for s in both] == ["fleiss-1981", "krippendorff-2004"]
    assert "0.40 to 0.75 fair to good" in both[0]["cut_points"]
    assert "Fleiss, J. L. (1981)" in both[0]["source"]
    assert statement("landis-koch-1977", {"kendall_w"}) == []
    assert SCALES["landis-koch-1977"].source.startswith("Landis, J. R., Koch, G. G. (1977)")


def test_unknown_scale_is_refused_with_its_position(tmp_path: Path, run_cli) -> None:
    import shutil

    shutil.copytree(STUDIES / "finish-grading", tmp_path / "s")
    path = tmp_path / "s" / "study.yaml"
    text = path.read_text(encoding="utf-8").replace(
        "\nconfidence: ", "\nsize_words: cohen-1960\nconfidence: ", 1
    )
    path.write_text(text, encoding="utf-8")
    line = text.splitlines().index("size_words: cohen-1960") + 1
    code, out, err = run_cli("check", path)
    assert code == 2
    assert f"study.yaml:{line}:13" in err and "size_words" in err
    assert "landis-koch-1977, fleiss-1981" in err
    code, out, err = run_cli("build", path, "-o", tmp_path / "out", "--no-pdf", "-q")
    assert code == 2 and not (tmp_path / "out").exists()


def test_report_method_statement_names_the_scale(tmp_path: Path, run_cli) -> None:
    import re

    code, out, err = run_cli(
        "build",
        STUDIES / "finish-grading" / "study.yaml",
        "-o",
        tmp_path / "out",
        "--no-pdf",
        "-q",
        "--generated-at",
        "2026-11-20T09:00:00Z",
    )
    assert code == 0, err
    (html,) = sorted((tmp_path / "out").rglob("*.html"))
    text = " ".join(re.sub(r"<[^>]+>", " ", html.read_text(encoding="utf-8")).split())
    assert "0.61 to 0.80 substantial; 0.81 to 1.00 almost perfect" in text
    assert "Landis, J. R., Koch, G. G. (1977)" in text
    assert "the acceptance criteria decide" in text
    # the former unsourced words are gone
    assert "very good agreement beyond chance" not in text
