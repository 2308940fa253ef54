"""Rounds (first qualification, then requalifications) and revisions (corrections of a round's
report): plan --round, the round folders, and the refusals.  The scenario is invented: visual
weld-spatter inspection on a robot cell, two inspectors, eight welds."""

from __future__ import annotations

import csv
import hashlib
import json
from pathlib import Path

import pytest

from reportgen.rounds import point_label, round_definition, round_id, split_round

REFERENCE = {"001": "SP", "002": "OK", "003": "OK", "004": "SP", "005": "OK", "006": "SP"}
REFERENCE.update({"007": "OK", "008": "OK"})


def _tree(folder: Path) -> dict[str, str]:
    return {
        p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
        for p in sorted(folder.rglob("*"))
        if p.is_file()
    }


def new_study(run_cli, folder: Path) -> Path:
    code, _, err = run_cli(
        "init", folder, "--plan", "--scale", "binary", "--categories", "OK=Clean,SP=Spatter",
        "--raters", "W1,W2", "--trials", "2", "--item-count", "8", "--id", "weld-spatter",
    )  # fmt: skip
    assert code == 0, err
    text = (folder / "study.yaml").read_text()
    text = text.replace('"Title of the study"', '"Weld spatter, robot cell 4"')
    text = text.replace('"What is judged"', '"Weld spatter"')
    text = text.replace("# date: 2026-01-31", "date: 2026-10-05")
    (folder / "study.yaml").write_text(text)
    rows = ["item,reference,borderline"] + [f"{i},{r},no" for i, r in REFERENCE.items()]
    (folder / "items.csv").write_text("\n".join(rows) + "\n")
    return folder


def fill_ratings(plan: Path, wrong: dict[str, set[str]] | None = None) -> None:
    """Enter every rating: the reference, except the items in ``wrong[rater]`` (called the
    other way in trial 1)."""
    key = {
        r["label"]: (r["item"], r["trial"])
        for r in csv.DictReader((plan / "key" / "key.csv").open())
    }
    entry = plan / "ratings-entry.csv"
    rows = list(csv.DictReader(entry.open()))
    for r in rows:
        item, trial = key[r["item"]]
        call = REFERENCE[item]
        if trial == "1" and item in (wrong or {}).get(r["rater"], set()):
            call = "OK" if call == "SP" else "SP"
        r["rating"] = call
    with entry.open("w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=["item", "rater", "trial", "rating"])
        w.writeheader()
        w.writerows(rows)


def test_round_ids() -> None:
    assert split_round("weld-spatter") == ("weld-spatter", 1)
    assert split_round("weld-spatter.round2") == ("weld-spatter", 2)
    assert split_round("weld-spatter.round12") == ("weld-spatter", 12)
    assert split_round("weld.round1") == ("weld.round1", 1)  # round 1 has no suffix
    assert split_round("weld.round0") == ("weld.round0", 1)
    assert round_id("weld", 1) == "weld" and round_id("weld", 3) == "weld.round3"
    assert point_label("weld.round3", 2) == "weld round 3 rev2"


def test_round_definition_keeps_the_study_and_moves_the_inputs() -> None:
    src = """# my study
study:
  id: weld
  title: "Weld"
  revision: 4
  date: 2026-01-01
scale: binary
ratings:
  file: ratings.xlsx
  sheet: R
reference: reference.csv
plan: {seed: 5, start: 2026-01-01}
report: {templates: company/}
"""
    out = round_definition(src, base_id="weld", n=2, date="2026-03-01", source="s.yaml")
    assert '  id: "weld.round2"' in out and "  revision: 1" in out and "  date: 2026-03-01" in out
    assert "ratings: plan/ratings-entry.csv\n" in out and "sheet: R" not in out
    assert "reference: items.csv" in out and "key: plan/key/key.csv" in out
    assert "seed: 5" not in out  # a new round draws new labels and orders
    assert "report: {templates: ../company/}" in out
    assert "2026-01-01" not in out


def test_plan_next_round_leaves_round_one_whole(run_cli, tmp_path: Path) -> None:
    study = new_study(run_cli, tmp_path / "weld")
    code, _, err = run_cli("plan", study, "--items", study / "items.csv", "--no-pdf", "-q")
    assert code == 0, err
    fill_ratings(study / "plan")
    before = _tree(study)
    code, out, err = run_cli(
        "plan", study, "--round", "next", "--no-pdf", "--start", "2026-11-09", "--json"
    )
    assert code == 0, err
    info = json.loads(out)
    assert info["round"] == {"round": 2, "folder": str(study / "round2")}
    after = _tree(study)
    assert {k: v for k, v in after.items() if not k.startswith("round2/")} == before
    r2 = study / "round2"
    assert (r2 / "items.csv").read_bytes() == (study / "items.csv").read_bytes()
    from reportgen.study import load_study

    s2 = load_study(r2 / "study.yaml", require_inputs=False)
    assert (s2.id, s2.revision, s2.title) == (
        "weld-spatter.round2",
        1,
        "Weld spatter, robot cell 4",
    )
    assert str(s2.date) == "2026-11-09"
    assert s2.key_path == (r2 / "plan" / "key" / "key.csv").resolve()
    # new labels: round 2's key shares no label with round 1's
    k1 = {r["label"] for r in csv.DictReader((study / "plan" / "key" / "key.csv").open())}
    k2 = {r["label"] for r in csv.DictReader((r2 / "plan" / "key" / "key.csv").open())}
    assert k1 and k2 and not (k1 & k2)
    # the round's STUDY may be given as any round's definition: next is then 3
    code, out, err = run_cli("plan", r2, "--round", "next", "--no-pdf", "--json")
    assert code == 0, err
    assert json.loads(out)["round"]["round"] == 3


def test_round_refusals_write_nothing(run_cli, tmp_path: Path) -> None:
    study = new_study(run_cli, tmp_path / "weld")
    code, _, err = run_cli("plan", study, "--items", study / "items.csv", "--no-pdf", "-q")
    assert code == 0, err
    code, _, err = run_cli("plan", study, "--round", "next", "--no-pdf", "-q")
    assert code == 0, err
    fill_ratings(study / "round2" / "plan")
    before = _tree(tmp_path)
    cases = [
        (("--round", "7"), 2, "there is no round 7: the latest round of weld-spatter is 2"),
        (("--round", "1"), 2, "round 1 is older than the latest round (2)"),
        (("--round", "later"), 2, "'later' is not a round"),
        (("--round", "2"), 5, "round 2 of weld-spatter already has ratings"),
        (("--round", "next", "-o", tmp_path / "o"), 2, "leave out -o/--output"),
    ]
    for args, code_wanted, message in cases:
        code, _, err = run_cli("plan", study, "--no-pdf", *args)
        assert code == code_wanted, (args, err)
        assert message in err, (args, err)
        assert _tree(tmp_path) == before, args


def test_a_round_without_ratings_yet_can_be_planned_again_only_if_its_plan_is_gone(
    run_cli, tmp_path: Path
) -> None:
    study = new_study(run_cli, tmp_path / "weld")
    assert run_cli("plan", study, "--round", "next", "--no-pdf", "-q")[0] == 0
    code, _, err = run_cli("plan", study, "--round", "2", "--no-pdf", "-q")
    assert code == 5 and "a plan already exists; it is kept" in err


def test_killed_plan_leaves_the_previous_round_whole(
    run_cli, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import reportgen.plan as plan_mod

    study = new_study(run_cli, tmp_path / "weld")
    assert run_cli("plan", study, "--items", study / "items.csv", "--no-pdf", "-q")[0] == 0
    fill_ratings(study / "plan")
    before = _tree(study)
    real = plan_mod._put
    calls = {"n": 0}

    def dies_half_way(path, data):  # type: ignore[no-untyped-def]
        calls["n"] += 1
        if calls["n"] == 3:  # some run sheets are on disk by now
            raise KeyboardInterrupt
        return real(path, data)

    monkeypatch.setattr(plan_mod, "_put", dies_half_way)
    code, _, _ = run_cli("plan", study, "--round", "next", "--no-pdf", "-q")
    assert code != 0  # click turns the interrupt into "aborted"
    assert _tree(study) == before  # round 1 whole, no round 2, no partial folder left
    assert sorted(p.name for p in study.iterdir()) == ["items.csv", "plan", "study.yaml"]
    # a partial folder left by a harder kill is ignored and cleared by the next run
    (study / ".partial-round2-1-dead").mkdir()
    monkeypatch.setattr(plan_mod, "_put", real)
    assert run_cli("plan", study, "--round", "next", "--no-pdf", "-q")[0] == 0
    assert sorted(p.name for p in study.iterdir()) == ["items.csv", "plan", "round2", "study.yaml"]


CRITERIA = """
criteria:
  source: "Robot cell 4 weld inspection plan (invented for the tests)"
  rules:
    - {measure: accuracy.*.effectiveness, pass: 0.90, marginal: 0.80, judge: estimate}
certification:
  valid_months: 12
  rules:
    - {measure: accuracy.effectiveness, pass: 0.90, judge: estimate}
"""


def _register(run_cli, day: str) -> dict[str, tuple[str, str]]:
    code, out, err = run_cli("register", "--as-of", day, "--json")
    assert code in (0, 1), err
    return {r["rater_id"]: (r["study_id"], r["status"]) for r in json.loads(out)["rows"]}


@pytest.mark.slow
@pytest.mark.render
def test_three_rounds_one_corrected_from_the_readme(
    run_cli, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The README's requalification walk-through: rounds are successive evidence, a corrected
    report is a new revision of its round, the register follows the latest round."""
    monkeypatch.chdir(tmp_path)  # the archive rule then finds ./archive
    monkeypatch.delenv("REPORTGEN_ARCHIVE", raising=False)
    study = new_study(run_cli, Path("weld"))
    text = (study / "study.yaml").read_text()
    text = text.replace(
        "bootstrap: {resamples: 2000, seed: 1}", "bootstrap: {resamples: 0, seed: 1}"
    )
    (study / "study.yaml").write_text(text + CRITERIA)
    when = ("--generated-at", "2026-12-01T08:00:00Z")

    # round 1: W2 calls three welds the other way -> IMPROVE, W2 not certified
    assert run_cli("plan", study, "--items", study / "items.csv", "--no-pdf", "-q")[0] == 0
    fill_ratings(study / "plan", {"W2": {"001", "002", "003"}})
    code, out, err = run_cli("build", study, "--archive", *when)
    assert code == 0, err
    assert out.startswith("weld-spatter revision 1: IMPROVE")

    # round 2 after retraining: everyone right -> PASS
    code, _, err = run_cli("plan", study, "--round", "next", "--start", "2026-11-09", "--no-pdf")
    assert code == 0, err
    r2 = study / "round2"
    fill_ratings(r2 / "plan")
    code, out, err = run_cli("build", r2, "--archive", *when)
    assert code == 0, err
    assert out.startswith("weld-spatter.round2 revision 1: PASS")
    # a correction of round 2's report (its title was wrong): revision 2 of round 2
    text = (r2 / "study.yaml").read_text().replace("  revision: 1", "  revision: 2")
    (r2 / "study.yaml").write_text(text.replace("robot cell 4", "robot cell 4 (line B)"))
    code, out, err = run_cli("build", r2, "--archive", *when)
    assert code == 0, err

    # round 3 a year on: W1 slips on one weld in trial 1 -> still certified (15/16 = 0.94)
    code, _, err = run_cli("plan", r2, "--round", "next", "--start", "2027-10-04", "--no-pdf")
    assert code == 0, err
    fill_ratings(study / "round3" / "plan", {"W1": {"005"}})
    code, out, err = run_cli("build", study / "round3", "--archive", *when)
    assert code == 0, err

    code, out, err = run_cli("history", "--json")
    assert code == 0, err
    (series,) = json.loads(out)["series"]
    points = [(p["round"], p["revision"], p["superseded_by"]) for p in series["points"]]
    assert points == [(1, 1, None), (2, 1, 2), (2, 2, None), (3, 1, None)]
    code, out, _ = run_cli("history")
    assert "weld-spatter round 2 rev1" in out and "weld-spatter round 3 rev1" in out

    # the register on every date: the latest round up to that day decides
    assert _register(run_cli, "2026-10-20") == {
        "W1": ("weld-spatter", "valid"),
        "W2": ("weld-spatter", "not certified"),
    }
    assert _register(run_cli, "2027-01-15") == {
        "W1": ("weld-spatter.round2", "valid"),
        "W2": ("weld-spatter.round2", "valid"),
    }
    assert _register(run_cli, "2027-10-20")["W1"] == ("weld-spatter.round3", "valid")
    # round 1's inputs and the archive were never touched by the later rounds
    assert (Path("archive") / "weld-spatter" / "rev1").is_dir()
    assert (Path("archive") / "weld-spatter.round2" / "rev2").is_dir()
