"""``reportgen plan``: blind run sheets, the key round trip, and the sample-size advice.

Published sources checked here:
- Cantor (1996, Psychological Methods 1:150-153): the precision-based sample size for Cohen's
  kappa with two ratings of a binary outcome, n = z² Q / d², where Q = n · Var(kappa) is the
  large-sample variance of Fleiss, Cohen & Everitt (1969, Psychological Bulletin 72:323-327).
  We compute Q here from the published FCE formula (written out independently of
  reportgen.stats) and check that the advice, which only simulates studies with our own engine,
  arrives at the same item count within the simulation's error.  The numbers printed in
  Cantor's tables could not be checked here (no copy of the paper was at hand); the equation
  numbering in Fleiss, Levin & Paik (2003, chapter 18) is from memory.
- Zero-failure sample sizes n = ln(1−C)/ln(R) (the success-run relation): 59 for R = C = 95 %,
  90 for R = 95 % and C = 99 %, 299 for R = 99 % and C = 95 %.
Rules of thumb on the item set are marked "common practice, no source" in the advice itself.
"""

from __future__ import annotations

import csv
import io
import json
import math
import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from reportgen.advice import advise, format_advice, item_set_checks, zero_failure_sizes
from reportgen.cli import cli
from reportgen.errors import ExistsError, ExitCode, InputError
from reportgen.plan import (
    KEY_WARNING_NAME,
    PlanItem,
    load_items,
    make_plan,
    plan_settings,
    read_plan_summary,
    write_plan,
)
from reportgen.ratings import load_ratings
from reportgen.stats.proportion import zero_failure_sample_size
from reportgen.study import load_study

ROOT = Path(__file__).resolve().parents[1]
STUDIES = ROOT / "studies"
DEMOS = ("finish-grading", "seal-check", "defect-triage")


# --------------------------------------------------------------------------- helpers


def _read_csv(path: Path) -> list[dict[str, str]]:
    return list(csv.DictReader(io.StringIO(path.read_text(encoding="utf-8"))))


def _copy_demo(tmp_path: Path, folder: str) -> Path:
    dst = tmp_path / folder
    shutil.copytree(STUDIES / folder, dst)
    return dst / "study.yaml"


def _plan_demo(
    tmp_path: Path, folder: str, *, pdf: bool = False, seed: int | None = None
) -> tuple[Path, Path]:
    study_file = _copy_demo(tmp_path, folder)
    study = load_study(study_file)
    items = load_items(study_file.parent / "items.csv", study)
    settings = plan_settings(study, seed=seed, today=__import__("datetime").date(2026, 11, 2))
    out = tmp_path / "out"
    folder_out = write_plan(make_plan(study, items, settings), study, output_dir=out, pdf=pdf)
    return study_file, folder_out


def _main(args: list[str], capsys: pytest.CaptureFixture[str]) -> tuple[int, str, str]:
    """Run ``reportgen.cli.main`` (which maps library errors to exit codes)."""
    from reportgen.cli import main

    with pytest.raises(SystemExit) as exc:
        main(args)
    out, err = capsys.readouterr()
    return int(exc.value.code or 0), out, err


def _write_study(tmp_path: Path, text: str, *, items: str | None = None) -> Path:
    tmp_path.mkdir(parents=True, exist_ok=True)
    (tmp_path / "study.yaml").write_text(text, encoding="utf-8")
    (tmp_path / "ratings.csv").write_text("item,rater,trial,rating\n", encoding="utf-8")
    if items is not None:
        (tmp_path / "items.csv").write_text(items, encoding="utf-8")
    return tmp_path / "study.yaml"


BINARY_ONE_RATER = """\
study: {id: KAPPA-SIZE, title: "Size check"}
scale: binary
categories:
  - {code: OK, label: Good}
  - {code: NG, label: Bad}
defect_category: NG
raters:
  - {id: R1, name: "One Rater"}
trials: 1
ratings: ratings.csv
confidence: 0.95
"""


# --------------------------------------------------------------------------- run sheets


@pytest.mark.parametrize("folder", DEMOS)
def test_run_sheets_differ_and_labels_never_repeat(tmp_path: Path, folder: str) -> None:
    study_file, plan_dir = _plan_demo(tmp_path, folder)
    study = load_study(study_file)
    items = [r["item"] for r in _read_csv(study_file.parent / "items.csv")]
    key = _read_csv(plan_dir / "key" / "key.csv")
    assert list(key[0]) == ["label", "item", "trial"]
    labels = [k["label"] for k in key]
    assert len(labels) == len(set(labels)) == len(items) * study.trials  # unique across trials
    label_to = {k["label"]: (k["item"], int(k["trial"])) for k in key}

    sheets = sorted((plan_dir / "sheets").glob("*.csv"))
    assert len(sheets) == len(study.raters) * study.trials
    orders = set()
    for sheet in sheets:
        rows = _read_csv(sheet)
        assert [int(r["order"]) for r in rows] == list(range(1, len(items) + 1))
        assert {r["rating"] for r in rows} == {""}
        trial = int(rows[0]["trial"])
        decoded = [label_to[r["label"]] for r in rows]
        assert {t for _, t in decoded} == {trial}  # a sheet's labels all belong to its own trial
        assert sorted(i for i, _ in decoded) == sorted(items)  # every item exactly once
        orders.add(tuple(i for i, _ in decoded))
    assert len(orders) == len(sheets)  # every rater/trial permutation differs


@pytest.mark.parametrize("folder", DEMOS)
def test_sheets_reveal_neither_item_id_nor_reference(tmp_path: Path, folder: str) -> None:
    study_file, plan_dir = _plan_demo(tmp_path, folder)
    items = _read_csv(study_file.parent / "items.csv")
    ids = [r["item"] for r in items]
    rater_side = [*sorted((plan_dir / "sheets").iterdir()), plan_dir / "ratings-entry.csv"]
    for path in rater_side:
        text = path.read_text(encoding="utf-8")
        for item_id in ids:
            assert item_id not in text, f"{path.name} shows item id {item_id}"
        assert "reference" not in text.lower()
    # the reference cannot leak through the layout either: apart from the order number and the
    # label, every row of a sheet is the same
    for html in (plan_dir / "sheets").glob("*.html"):
        body = html.read_text(encoding="utf-8").split("<tbody>")[1].split("</tbody>")[0]
        rows = [r for r in body.split("<tr>")[1:]]
        shapes = set()
        for r in rows:
            cells = r.split("</td>")
            shapes.add("</td>".join(cells[2:]).strip())
        assert len(shapes) == 1
    # the key sits apart, with its warning
    assert not list((plan_dir / "sheets").glob("key*"))
    assert "DO NOT GIVE IT TO THE RATERS" in (plan_dir / "key" / KEY_WARNING_NAME).read_text(
        encoding="utf-8"
    )


@pytest.mark.render
# WeasyPrint 70 leaves its sRGB profile file open (a ResourceWarning raised at garbage collection)
@pytest.mark.filterwarnings(
    "ignore::ResourceWarning", "ignore::pytest.PytestUnraisableExceptionWarning"
)
def test_pdf_sheets_hold_labels_but_no_item_ids(tmp_path: Path) -> None:
    import pypdf

    study_file, plan_dir = _plan_demo(tmp_path, "seal-check", pdf=True)
    ids = [r["item"] for r in _read_csv(study_file.parent / "items.csv")]
    pdfs = sorted((plan_dir / "sheets").glob("*.pdf"))
    assert len(pdfs) == 9
    text = "\n".join(p.extract_text() for p in pypdf.PdfReader(pdfs[0]).pages)
    sheet = _read_csv(pdfs[0].with_suffix(".csv"))
    assert all(r["label"] in text for r in sheet)
    assert "INS-A" in text and "Lena Brauer" in text and "Accept" in text and "Reject" in text
    assert not any(item_id in text for item_id in ids)


def test_round_trip_filled_entry_file_decodes_to_the_ratings(tmp_path: Path) -> None:
    """Fill the data-entry file from known ratings; the key gives back the same codes array."""
    study_file, plan_dir = _plan_demo(tmp_path, "seal-check")
    study_dir = study_file.parent
    truth = load_ratings(load_study(study_file))
    known = {
        (r["item"], r["rater"], int(r["trial"])): r["rating"]
        for r in _read_csv(study_dir / "ratings.csv")
    }
    key = {
        k["label"]: (k["item"], int(k["trial"])) for k in _read_csv(plan_dir / "key" / "key.csv")
    }
    entry = _read_csv(plan_dir / "ratings-entry.csv")
    with open(study_dir / "entered.csv", "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["item", "rater", "trial", "rating"])
        for row in entry:
            item, trial = key[row["item"]]
            assert int(row["trial"]) == trial
            w.writerow(
                [row["item"], row["rater"], row["trial"], known[(item, row["rater"], trial)]]
            )
    shutil.copy(plan_dir / "key" / "key.csv", study_dir / "key.csv")
    text = study_file.read_text(encoding="utf-8").replace(
        "ratings: ratings.csv", "ratings: entered.csv\nkey: key.csv"
    )
    study_file.write_text(text, encoding="utf-8")

    decoded = load_ratings(load_study(study_file))
    assert sorted(decoded.items) == sorted(truth.items)
    order = [decoded.items.index(i) for i in truth.items]
    assert np.array_equal(decoded.codes[order], truth.codes)
    assert np.array_equal(decoded.reference[order], truth.reference)


def test_same_seed_same_plan_other_seed_other_plan(tmp_path: Path) -> None:
    _, a = _plan_demo(tmp_path / "a", "finish-grading")
    _, b = _plan_demo(tmp_path / "b", "finish-grading")
    _, c = _plan_demo(tmp_path / "c", "finish-grading", seed=99)
    for name in (
        "key/key.csv",
        "ratings-entry.csv",
        "sheets/G1-trial-2.csv",
        "sheets/G1-trial-2.html",
        "plan.json",
    ):
        assert (a / name).read_bytes() == (b / name).read_bytes()
    assert (a / "key/key.csv").read_bytes() != (c / "key/key.csv").read_bytes()
    assert json.loads((c / "plan.json").read_text())["seed"] == 99
    assert json.loads((a / "plan.json").read_text())["seed"] == 4021  # the study's plan.seed


def test_plan_summary_records_seed_dates_gap_and_design(tmp_path: Path) -> None:
    _, plan_dir = _plan_demo(tmp_path, "seal-check")
    s = read_plan_summary(plan_dir)
    assert s is not None and s["schema"] == "reportgen-plan/1"
    assert s["seed"] == 5077 and s["gap_days"] == 10 and s["gap_source"] == "study definition"
    assert [d["date"] for d in s["trial_dates"]] == ["2026-11-02", "2026-11-12", "2026-11-22"]
    d = s["design"]
    assert (d["items"], d["raters"], d["trials"], d["run_sheets"], d["ratings"]) == (
        50,
        3,
        3,
        9,
        450,
    )
    assert d["reference_counts"] == {"ACC": 31, "REJ": 19}
    assert d["borderline_items"] == 12 and d["borderline_share"] == pytest.approx(0.24)
    assert s["labels"]["unique_across_trials"] is True
    txt = (plan_dir / "plan.txt").read_text(encoding="utf-8")
    assert "Seed: 5077" in txt and "10 day(s)" in txt and "Trial 3: planned for 2026-11-22" in txt


def test_existing_plan_is_kept_and_refused(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    study_file, plan_dir = _plan_demo(tmp_path, "defect-triage")
    before = {p: p.read_bytes() for p in plan_dir.rglob("*") if p.is_file()}
    args = [
        "plan",
        str(study_file),
        "--items",
        str(study_file.parent / "items.csv"),
        "--output",
        str(tmp_path / "out"),
        "--no-pdf",
        "--seed",
        "5",
    ]
    code, _, err = _main(args, capsys)
    assert code == ExitCode.EXISTS
    assert "a plan already exists" in err
    with pytest.raises(ExistsError):
        CliRunner().invoke(cli, args, catch_exceptions=False)
    assert {p: p.read_bytes() for p in plan_dir.rglob("*") if p.is_file()} == before


def test_failed_write_leaves_nothing_behind(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    import reportgen.plan as planmod

    study_file = _copy_demo(tmp_path, "finish-grading")
    study = load_study(study_file)
    items = load_items(study_file.parent / "items.csv", study)
    plan = make_plan(study, items, plan_settings(study))
    calls = {"n": 0}
    real = planmod.render_sheet_html

    def flaky(*a, **kw):  # type: ignore[no-untyped-def]
        calls["n"] += 1
        if calls["n"] == 3:
            raise RuntimeError("disk trouble")
        return real(*a, **kw)

    monkeypatch.setattr(planmod, "render_sheet_html", flaky)
    out = tmp_path / "out"
    with pytest.raises(RuntimeError):
        write_plan(plan, study, output_dir=out, pdf=False)
    assert list((out / study.id).iterdir()) == []  # no plan, no temporary sibling


def test_cli_writes_plan_and_prints_summary(tmp_path: Path) -> None:
    study_file = _copy_demo(tmp_path, "finish-grading")
    out = tmp_path / "out"
    res = CliRunner().invoke(
        cli,
        [
            "plan",
            str(study_file),
            "--items",
            str(study_file.parent / "items.csv"),
            "--output",
            str(out),
            "--no-pdf",
            "--start",
            "2027-01-11",
        ],
    )
    assert res.exit_code == 0, res.output
    assert "Trial 2: planned for 2027-01-18" in res.output
    assert "Keep" in res.output and "key" in res.output
    plan_dir = out / "FINISH-GRADE-DEMO" / "plan"
    assert len(list((plan_dir / "sheets").glob("*.html"))) == 8
    assert not list((plan_dir / "sheets").glob("*.pdf"))


def test_cli_needs_items_or_advise(tmp_path: Path) -> None:
    res = CliRunner().invoke(cli, ["plan", str(STUDIES / "seal-check" / "study.yaml")])
    assert res.exit_code != 0
    assert "--items" in res.output and "--advise" in res.output


@pytest.mark.parametrize(
    ("content", "line", "fragment"),
    [
        ("item,reference\nA1,OK\nA2,MAYBE\n", 3, "reference 'MAYBE' is not a category"),
        ("item,reference\nA1,OK\nA1,NG\n", 3, "listed twice (first on line 2)"),
        ("item,ref\nA1,OK\n", 1, "column 'reference' is missing"),
        ("item,reference,borderline\nA1,OK,perhaps\n", 2, "borderline must be yes or no"),
        ("item,reference,colour\nA1,OK,red\n", 1, "unknown column 'colour'"),
        ("item,reference\n,OK\n", 2, "item is blank"),
        ("", 1, "empty"),
    ],
)
def test_bad_item_lists_name_file_and_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], content: str, line: int, fragment: str
) -> None:
    study_file = _write_study(tmp_path, BINARY_ONE_RATER, items=content)
    with pytest.raises(InputError) as exc:
        load_items(tmp_path / "items.csv", load_study(study_file))
    p = exc.value.problems()[0]
    assert p.location.path.endswith("items.csv") and p.location.line == line
    assert fragment in p.message
    code, _, err = _main(
        [
            "plan",
            str(study_file),
            "--items",
            str(tmp_path / "items.csv"),
            "--output",
            str(tmp_path / "o"),
        ],
        capsys,
    )
    assert code == ExitCode.INPUT
    assert f"items.csv:{line}" in err and fragment in err
    assert not (tmp_path / "o").exists()  # nothing written


def test_unknown_plan_key_is_refused_with_its_line(tmp_path: Path) -> None:
    study_file = _write_study(tmp_path, BINARY_ONE_RATER + "plan: {seed: 3, gap_dayz: 4}\n")
    with pytest.raises(InputError) as exc:
        plan_settings(load_study(study_file))
    p = exc.value.problems()[0]
    assert (
        p.location.line == 12 and p.location.key == "plan.gap_dayz" and "gap_days" in (p.hint or "")
    )


def test_too_few_items_for_distinct_orders(tmp_path: Path) -> None:
    study = load_study(STUDIES / "seal-check" / "study.yaml")  # 3 raters x 3 trials = 9 sheets
    items = (
        PlanItem("A", "ACC", None, 2),
        PlanItem("B", "REJ", None, 3),
        PlanItem("C", "ACC", None, 4),
    )
    with pytest.raises(InputError, match="only 6 different orders"):
        make_plan(study, items, plan_settings(study))


# --------------------------------------------------------------------------- advice


@pytest.mark.parametrize(
    ("reliability", "confidence", "n"), [(0.95, 0.95, 59), (0.95, 0.99, 90), (0.99, 0.95, 299)]
)
def test_zero_failure_sizes(reliability: float, confidence: float, n: int) -> None:
    """n = ln(1−C)/ln(R), rounded up: 59, 90 and 299 (success-run relation)."""
    assert zero_failure_sample_size(reliability, confidence) == n
    assert math.ceil(math.log(1 - confidence) / math.log(reliability)) == n
    shown = {
        (z.reliability, z.confidence): z.ratings
        for z in zero_failure_sizes(load_study(STUDIES / "seal-check" / "study.yaml"))
    }
    assert shown[(reliability, confidence)] == n


def test_zero_failure_size_follows_the_miss_rate_criterion() -> None:
    zs = zero_failure_sizes(load_study(STUDIES / "seal-check" / "study.yaml"))
    crit = [z for z in zs if z.reason.startswith("criterion")]
    assert len(crit) == 1 and crit[0].reliability == pytest.approx(0.98) and crit[0].ratings == 149
    assert (
        zero_failure_sizes(load_study(STUDIES / "defect-triage" / "study.yaml")) == []
    )  # no defect category


def _fce_q(shares: list[float], kappa_vs_ref: float) -> float:
    """Q = n·Var(kappa) of Fleiss, Cohen & Everitt (1969) for the table of the advice's model.

    Cell (i, j): reference i, rating j, p_ij = pi_i (a·[i = j] + (1 − a) pi_j).
    Var = [Σ_i p_ii (1 − (p_i. + p_.i)(1 − κ))² + (1 − κ)² Σ_{i≠j} p_ij (p_.i + p_j.)²
           − (κ − p_e (1 − κ))²] / (n (1 − p_e)²).
    """
    k = len(shares)
    a = kappa_vs_ref
    p = [[shares[i] * (a * (i == j) + (1 - a) * shares[j]) for j in range(k)] for i in range(k)]
    row = [sum(p[i]) for i in range(k)]
    col = [sum(p[i][j] for i in range(k)) for j in range(k)]
    po = sum(p[i][i] for i in range(k))
    pe = sum(row[i] * col[i] for i in range(k))
    kap = (po - pe) / (1 - pe)
    assert kap == pytest.approx(a)
    diag = sum(p[i][i] * (1 - (row[i] + col[i]) * (1 - kap)) ** 2 for i in range(k))
    off = (1 - kap) ** 2 * sum(
        p[i][j] * (col[i] + row[j]) ** 2 for i in range(k) for j in range(k) if i != j
    )
    return (diag + off - (kap - pe * (1 - kap)) ** 2) / (1 - pe) ** 2


@pytest.mark.slow
@pytest.mark.parametrize(("defect_share", "kappa"), [(0.3, 0.6), (0.5, 0.8)])
def test_advice_reproduces_the_cantor_1996_sample_size(
    tmp_path: Path, defect_share: float, kappa: float
) -> None:
    """Cantor (1996): n = z²·Q/d² items for a 95 % interval of half-width d = 0.10."""
    n_items = 100
    n_bad = round(defect_share * n_items)
    items_csv = "item,reference\n" + "".join(
        f"P{i},{'NG' if i < n_bad else 'OK'}\n" for i in range(n_items)
    )
    study_file = _write_study(tmp_path, BINARY_ONE_RATER, items=items_csv)
    study = load_study(study_file)
    items = load_items(tmp_path / "items.csv", study)
    z = 1.959963984540054
    published = math.ceil(z * z * _fce_q([1 - defect_share, defect_share], kappa) / 0.10**2)
    assert published == {(0.3, 0.6): 296, (0.5, 0.8): 139}[(defect_share, kappa)]

    adv = advise(
        study,
        items=items,
        agreement=kappa,
        target=0.10,
        item_counts=(100, 150, 200, 300, 400),
        runs=400,
        seed=11,
    )
    (ck,) = [m for m in adv.measures if m.measure == "accuracy.cohen_kappa"]
    assert abs(ck.items_needed - published) <= 0.06 * published, (ck.items_needed, published)
    # and the simulated half-width at the count found is the target, within simulation error
    assert ck.check_half_width == pytest.approx(0.10, abs=3 * ck.check_sim_error + 0.003)
    # the half-width falls like 1/sqrt(n): 400 items give half the half-width of 100 items
    h = {r.items: r.half_width for r in ck.rows}
    assert h[400] / h[100] == pytest.approx(0.5, abs=0.03)


def test_advice_for_a_demo_study_with_its_item_list() -> None:
    study = load_study(STUDIES / "seal-check" / "study.yaml")
    items = load_items(STUDIES / "seal-check" / "items.csv", study)
    adv = advise(study, items=items, agreement=0.9, item_counts=(30, 60, 120), runs=60, seed=3)
    names = [m.measure for m in adv.measures]
    assert names == [
        "reproducibility.fleiss_kappa",
        "repeatability.fleiss_kappa",
        "accuracy.cohen_kappa",
        "accuracy.effectiveness",
        "accuracy.miss_rate",
    ]
    assert adv.shares == pytest.approx((31 / 50, 19 / 50)) and adv.shares_source == "item list"
    for m in adv.measures:
        hw = [r.half_width for r in m.rows]
        assert hw[0] > hw[1] > hw[2]  # more items, narrower intervals
        assert m.items_needed is not None and m.check_half_width is not None
        assert m.check_half_width <= adv.target_half_width + 3 * (m.check_sim_error or 0) + 0.005
    fk = adv.measures[0]
    assert fk.rows[-1].estimate == pytest.approx(0.81, abs=0.03)  # two ratings agree at a²
    text = format_advice(adv)
    assert "common practice, no source" in text and "R = 95 %, C = 95 %: 59" in text
    assert (
        json.loads(json.dumps(adv.as_dict()))["measures"][0]["measure"]
        == "reproducibility.fleiss_kappa"
    )


def test_item_set_checks_flag_a_poor_item_set(tmp_path: Path) -> None:
    study = load_study(_write_study(tmp_path, BINARY_ONE_RATER))
    items = [PlanItem(f"I{i}", "NG" if i < 2 else "OK", i == 0, i + 2) for i in range(20)]
    checks = {c.topic: c for c in item_set_checks(study, items)}
    assert not checks["items"].ok and "fewer than 30" in checks["items"].finding
    assert not checks["borderline"].ok and "5 % borderline" in checks["borderline"].finding
    assert not checks["category NG"].ok and not checks["defect share"].ok
    assert "Feinstein & Cicchetti (1990)" in checks["defect share"].basis
    assert all("common practice, no source" in c.basis for c in checks.values())


def test_cli_advise_without_items(tmp_path: Path) -> None:
    res = CliRunner().invoke(
        cli,
        [
            "plan",
            str(STUDIES / "defect-triage" / "study.yaml"),
            "--advise",
            "--runs",
            "20",
            "--agreement",
            "0.85",
            "--json",
        ],
    )
    assert res.exit_code == 0, res.output
    data = json.loads(res.output)
    adv = data["advice"]
    assert "plan" not in data
    assert adv["shares_source"] == "equal shares (no item list)" and adv["agreement"] == 0.85
    assert [m["measure"] for m in adv["measures"]] == [
        "reproducibility.fleiss_kappa"
    ]  # 1 trial, no reference
    assert adv["zero_failure"] == [] and adv["item_checks"] == []


def test_cli_plan_with_advice_stores_it_in_the_summary(tmp_path: Path) -> None:
    study_file = _copy_demo(tmp_path, "defect-triage")
    out = tmp_path / "out"
    res = CliRunner().invoke(
        cli,
        [
            "plan",
            str(study_file),
            "--items",
            str(study_file.parent / "items.csv"),
            "--output",
            str(out),
            "--no-pdf",
            "--advise",
            "--runs",
            "20",
        ],
    )
    assert res.exit_code == 0, res.output
    assert "Sample-size advice" in res.output
    summary = read_plan_summary(out / "RETURNS-TRIAGE-DEMO" / "plan")
    assert (
        summary is not None
        and summary["advice"]["measures"][0]["measure"] == "reproducibility.fleiss_kappa"
    )
    assert summary["design"]["trials"] == 1 and summary["gap_source"] == "default"


def test_recommended_layout_round_trip_with_missing_ratings(tmp_path: Path) -> None:
    """Copy the plan into the study folder, fill the entry file (leaving out the ratings that
    were skipped), point the study at plan/: same codes, and the plan summary is found."""
    from reportgen.plan import find_plan_summary

    study_file, plan_dir = _plan_demo(tmp_path, "defect-triage")
    study_dir = study_file.parent
    truth = load_ratings(load_study(study_file))
    known = {(r["item"], r["rater"]): r["rating"] for r in _read_csv(study_dir / "ratings.csv")}
    shutil.copytree(plan_dir, study_dir / "plan")
    key = {k["label"]: k["item"] for k in _read_csv(study_dir / "plan" / "key" / "key.csv")}
    rows = _read_csv(study_dir / "plan" / "ratings-entry.csv")
    with open(study_dir / "plan" / "ratings-entry.csv", "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["item", "rater", "trial", "rating"])
        for row in rows:
            rating = known.get((key[row["item"]], row["rater"]))
            if rating is not None:  # a skipped item stays out (missing: allow)
                w.writerow([row["item"], row["rater"], row["trial"], rating])
    text = study_file.read_text(encoding="utf-8").replace(
        "ratings: ratings.csv", "ratings: plan/ratings-entry.csv\nkey: plan/key/key.csv"
    )
    study_file.write_text(text, encoding="utf-8")
    study = load_study(study_file)
    decoded = load_ratings(study)
    order = [decoded.items.index(i) for i in truth.items]
    assert np.array_equal(decoded.codes[order], truth.codes)
    assert int((decoded.codes < 0).sum()) == 5
    found = find_plan_summary(study)
    assert found is not None and found["seed"] == 6133 and "blinding" in found


def test_item_list_may_leave_out_the_reference_when_the_study_has_none(tmp_path: Path) -> None:
    study = load_study(STUDIES / "defect-triage" / "study.yaml")
    (tmp_path / "items.csv").write_text("item,borderline\nA,no\nB,yes\nC,no\n", encoding="utf-8")
    items = load_items(tmp_path / "items.csv", study)
    assert [(i.item, i.reference, i.borderline) for i in items] == [
        ("A", None, False),
        ("B", None, True),
        ("C", None, False),
    ]
    plan = make_plan(study, items, plan_settings(study))
    assert plan.summary["design"]["reference_counts"] is None
    assert len(plan.sheets) == 5 and len({s.rows for s in plan.sheets}) == 5


def test_defaults_without_a_plan_block(tmp_path: Path) -> None:
    import datetime as dt

    study = load_study(_write_study(tmp_path, BINARY_ONE_RATER))
    s = plan_settings(study, today=dt.date(2027, 3, 1))
    assert (s.gap_days, s.gap_source, s.seed_source, s.start) == (
        7,
        "default",
        "drawn",
        dt.date(2027, 3, 1),
    )
    assert plan_settings(study, seed=12).seed_source == "command line"


def test_plan_command_starts_without_the_heavy_libraries() -> None:
    import subprocess
    import sys

    code = (
        "import sys; from reportgen.cli import cli; "
        "cli.main(['plan', '--help'], standalone_mode=False); "
        "print(sorted(m for m in ('numpy', 'pandas', 'jinja2', 'weasyprint', 'matplotlib', 'scipy') if m in sys.modules))"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, check=True
    ).stdout
    assert out.strip().splitlines()[-1] == "[]"
