"""End to end: ``reportgen stats --json`` on a 1.9 M-rating campaign file against a
reference-library pipeline that computes point estimates only, in one run.

Run on demand (not a test):

    .venv/bin/python benchmarks/end_to_end.py                 # 3 runs of each, seed 20261202
    .venv/bin/python benchmarks/end_to_end.py --runs 5 --keep # keep the files in /tmp

The data are invented and seeded: 100,000 items × 20 raters × 1 trial on an ordered scale of
5 categories (codes 1..5), 5 % of the ratings missing (left out of the CSV), so the long-form
CSV holds about 1.9 M ratings.  No reference by default (a labelling campaign rarely has one
for every item); ``--reference`` adds one per item (reference.csv), so that the per-rater
accuracy figures are computed as well.  The study asks for 2,000 bootstrap
resamples of items (the default), so our figures come with bootstrap intervals.

Timed, each as a fresh process (imports included, as a user sees it), runs interleaved so
that machine load hits both alike:

* **ours** — ``python -m reportgen stats STUDY.yaml --json > /dev/null``: read the YAML and the
  CSV (exact, with line numbers), every measure of issue 3 with intervals (2,000-resample item
  bootstrap), the verdict, the JSON;
* **reference pipeline** — ``pandas.read_csv`` of the same CSV, pivot to items × raters, then
  statsmodels ``fleiss_kappa`` (on the items × categories table of the items with all 20
  ratings: it needs the same number on every item), ``krippendorff.alpha`` (ordinal) and
  irrCAC ``CAC(...).gwet()`` (AC1): point estimates only (irrCAC adds its analytic interval),
  no bootstrap, no per-rater figures.  Both commands must exit with status 0.

Also printed: an in-process breakdown of our stages (load study, load ratings, analyse,
verdict, JSON) with the peak resident memory of the ``reportgen stats`` process.
"""

from __future__ import annotations

import argparse
import os
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# As `reportgen stats` does for itself: one BLAS thread (the engine's matrices are small; a
# second thread only spins on two shared cores).  Inherited by both timed commands.
os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
PY = sys.executable

REFERENCE_PIPELINE = r"""
import sys
import pandas as pd
import numpy as np
import krippendorff
from irrCAC.raw import CAC
from statsmodels.stats.inter_rater import fleiss_kappa

df = pd.read_csv(sys.argv[1], dtype={"item": str, "rater": str, "trial": int, "rating": int})
wide = df.pivot(index="item", columns="rater", values="rating")
counts = df.groupby(["item", "rating"]).size().unstack(fill_value=0).to_numpy()
# statsmodels needs the same number of ratings on every item: the complete items only
m = counts.sum(axis=1)
fk = fleiss_kappa(counts[m == m.max()])
alpha = krippendorff.alpha(reliability_data=wide.to_numpy(dtype=float).T,
                           level_of_measurement="ordinal")
ac1 = CAC(wide).gwet()["est"]["coefficient_value"]
print(fk, alpha, ac1)
"""


def make_campaign(
    folder: Path,
    *,
    seed: int,
    items: int = 100_000,
    raters: int = 20,
    k: int = 5,
    missing: float = 0.05,
    resamples: int = 2000,
    reference: bool = False,
) -> Path:
    """Write study.yaml and ratings.csv (and reference.csv with ``reference``) of an invented
    labelling campaign."""
    rng = np.random.default_rng(seed)
    # each item has a true grade (unequal prevalence); a rater is right with probability 0.75,
    # otherwise one grade off (or any grade, rarely); 5 % of the ratings are missing
    prevalence = np.linspace(2.0, 1.0, k)
    truth = rng.choice(k, size=items, p=prevalence / prevalence.sum())
    shape = (items, raters)
    u = rng.random(shape)
    step = rng.choice([-1, 1], size=shape)
    wild = rng.integers(0, k, size=shape)
    codes = np.where(
        u < 0.75, truth[:, None], np.where(u < 0.95, np.clip(truth[:, None] + step, 0, k - 1), wild)
    )
    present = rng.random(shape) >= missing
    ids = np.array([f"BAG-{i + 1:06d}" for i in range(items)])
    rater_ids = np.array([f"L{g + 1:02d}" for g in range(raters)])
    # rows in rater-major order, as a labelling tool would export them, shuffled within rater
    rows_item, rows_rater = np.nonzero(present.T)[1], np.nonzero(present.T)[0]
    lines = np.char.add(
        np.char.add(np.char.add(ids[rows_item], ","), np.char.add(rater_ids[rows_rater], ",1,")),
        (codes[rows_item, rows_rater] + 1).astype(str),
    )
    folder.mkdir(parents=True, exist_ok=True)
    with open(folder / "ratings.csv", "w", encoding="utf-8", newline="\n") as fh:
        fh.write("item,rater,trial,rating\n")
        fh.write("\n".join(lines.tolist()))
        fh.write("\n")
    if reference:
        ref_lines = np.char.add(np.char.add(ids, ","), (truth + 1).astype(str))
        with open(folder / "reference.csv", "w", encoding="utf-8", newline="\n") as fh:
            fh.write("item,reference\n")
            fh.write("\n".join(ref_lines.tolist()))
            fh.write("\n")
    cats = "\n".join(
        f"  - {{code: {c + 1}, label: Grade {c + 1}, value: {c + 1}}}" for c in range(k)
    )
    people = "\n".join(f"  - {{id: {r}, name: Labeller {r}}}" for r in rater_ids)
    (folder / "study.yaml").write_text(
        "# Invented benchmark campaign (benchmarks/end_to_end.py)\n"
        "study:\n  id: E2E-CAMPAIGN\n  title: Produce grading campaign (benchmark)\n"
        "  revision: 1\n"
        f"scale: ordinal\ncategories:\n{cats}\nraters:\n{people}\n"
        "trials: 1\nratings: ratings.csv\n"
        + ("reference: reference.csv\n" if reference else "")
        + "missing: allow\n"
        f"bootstrap: {{resamples: {resamples}, seed: 7}}\nweights: linear\n",
        encoding="utf-8",
    )
    return folder / "study.yaml"


def wall(cmd: list[str]) -> tuple[float, int]:
    """Wall time of a command (stdout discarded) and its own peak RSS in MB (Linux)."""
    t0 = time.perf_counter()
    proc = subprocess.Popen(
        cmd,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        cwd=REPO,
        env={**os.environ, "CI": "1"},
    )
    assert proc.stderr is not None
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    dt = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise SystemExit(f"{' '.join(cmd)} failed ({proc.returncode}):\n{err.decode()}")
    return dt, int(usage.ru_maxrss / 1024)


def stages(study_path: Path) -> dict[str, float]:
    """In-process times of our stages (after imports), one run."""
    from reportgen.analysis import analyse
    from reportgen.commands.stats import dumps_results
    from reportgen.ratings import load_ratings
    from reportgen.study import load_study
    from reportgen.verdict import judge

    out: dict[str, float] = {}
    t0 = time.perf_counter()
    study = load_study(study_path)
    out["load_study"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    ratings = load_ratings(study)
    out["load_ratings"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    results = analyse(study, ratings)
    out["analyse"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    results.update(judge(study, results))
    out["judge"] = time.perf_counter() - t0
    t0 = time.perf_counter()
    text = dumps_results(results)
    out["json"] = time.perf_counter() - t0
    out["json_mb"] = len(text) / 1e6
    return out


def typical_study_times(runs: int = 60) -> tuple[float, float, float]:
    """CPU time of analyse() on a typical study (50 items × 3 raters × 3 trials, ordinal,
    4 categories, reference, 2,000 bootstrap resamples): (min, median) in ms, and the
    no-bootstrap minimum, in process after a warm-up."""
    from reportgen.analysis import analyse
    from reportgen.model import Category, Rater, Ratings, Study

    rng = np.random.default_rng(6)
    n, r, t, k = 50, 3, 3, 4
    truth = rng.integers(0, k, size=n)
    noise = rng.integers(-1, 2, size=(n, r, t)) * (rng.random((n, r, t)) < 0.3)
    codes = np.clip(truth[:, None, None] + noise, 0, k - 1).astype(np.int8)

    def study(resamples: int) -> Study:
        return Study(
            path=Path("/tmp/typical.yaml"),
            id="TYPICAL",
            title="typical study",
            purpose=None,
            characteristic=None,
            station=None,
            revision=1,
            date=None,
            scale="ordinal",
            categories=tuple(Category(code=c, label=c) for c in "ABCD"),
            raters=tuple(Rater(id=f"R{i + 1}", name=f"R{i + 1}") for i in range(r)),
            trials=t,
            ratings_path=Path("/tmp/typical.csv"),
            defect_category="D",
            bootstrap_resamples=resamples,
            bootstrap_seed=7,
        )

    with_boot, without = study(2000), study(0)
    ratings = Ratings(
        items=tuple(f"I{i + 1}" for i in range(n)),
        raters=with_boot.rater_ids,
        categories=with_boot.category_codes,
        codes=codes,
        reference=truth.astype(np.int8),
    )

    def cpu(st: Study) -> list[float]:
        analyse(st, ratings)
        out = []
        for _ in range(runs):
            t0 = time.process_time()
            analyse(st, ratings)
            out.append(time.process_time() - t0)
        return sorted(out)

    a, b = cpu(with_boot), cpu(without)
    return a[0] * 1e3, statistics.median(a) * 1e3, b[0] * 1e3


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--seed", type=int, default=20261202)
    parser.add_argument("--keep", action="store_true", help="keep the generated files")
    parser.add_argument("--no-refs", action="store_true", help="our pipeline only")
    parser.add_argument(
        "--reference",
        action="store_true",
        help="also give every item a reference category (reference.csv), so "
        "that the accuracy figures are computed too",
    )
    parser.add_argument("--make", metavar="FOLDER", help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.make:
        make_campaign(Path(args.make), seed=args.seed, reference=args.reference)
        return 0
    folder = Path(tempfile.mkdtemp(prefix="reportgen-e2e-"))
    try:
        t0 = time.perf_counter()
        # made in a child process, so that this one stays small: a child's peak RSS counts
        # the memory of the process it was forked from
        subprocess.run(
            [PY, __file__, "--make", str(folder), "--seed", str(args.seed)]
            + (["--reference"] if args.reference else []),
            check=True,
        )
        study = folder / "study.yaml"
        n_lines = sum(1 for _ in open(folder / "ratings.csv", encoding="utf-8")) - 1
        print(
            f"data: {folder} ({n_lines:,} ratings, "
            f"{(folder / 'ratings.csv').stat().st_size / 1e6:.1f} MB, "
            f"made in {time.perf_counter() - t0:.1f} s)"
        )
        ref_script = folder / "reference_pipeline.py"
        ref_script.write_text(REFERENCE_PIPELINE, encoding="utf-8")
        ours_cmd = [PY, "-m", "reportgen", "stats", str(study), "--json"]
        ref_cmd = [PY, str(ref_script), str(folder / "ratings.csv")]
        ours: list[float] = []
        refs: list[float] = []
        peak = 0
        for _ in range(args.runs):
            dt, rss = wall(ours_cmd)
            ours.append(dt)
            peak = max(peak, rss)
            if not args.no_refs:
                refs.append(wall(ref_cmd)[0])
        br = stages(study)
        lo, med, no_boot = typical_study_times()
        print(
            f"typical study 50×3×3, every measure with 2,000-resample bootstrap: analyse() "
            f"{lo:.1f} ms min, {med:.1f} ms median CPU (without the bootstrap {no_boot:.1f} ms)"
        )
        print(
            f"reportgen stats --json: median {statistics.median(ours):.2f} s, "
            f"best {min(ours):.2f} s over {len(ours)} runs (peak RSS {peak} MB)"
        )
        if refs:
            print(
                f"reference pipeline (pandas + statsmodels + krippendorff + irrCAC, point "
                f"estimates only): median {statistics.median(refs):.2f} s, best {min(refs):.2f} s"
            )
            print(
                f"ratio reference / ours (medians): "
                f"{statistics.median(refs) / statistics.median(ours):.2f}"
            )
        print(
            "our stages in process: "
            + ", ".join(
                f"{k} {v:.2f} s" if k != "json_mb" else f"JSON {v:.0f} MB" for k, v in br.items()
            )
        )
    finally:
        if args.keep:
            print(f"kept {folder}")
        else:
            shutil.rmtree(folder, ignore_errors=True)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
