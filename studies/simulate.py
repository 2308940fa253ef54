"""Make the demo studies' data: one seeded simulation, run with ``python studies/simulate.py``.

Every scenario below is invented for reportgen.  Running the script rewrites every generated
CSV of every demo study byte for byte the same (fixed seeds, sorted output, ``\\n`` line ends);
the study definitions (``study.yaml``) are written by hand and are not touched.

The model, the same for every study:

* every item has a **latent position** on the scale of the characteristic (higher = worse);
  its reference category is the band the position falls in;
* **borderline items** sit close to a band limit, where honest raters disagree;
* every item has a **difficulty** (how hard it is to see), which multiplies the rater's noise;
* every rater has a **strictness** (a shift of the position they perceive: positive = calls
  items worse than they are) and an **error rate** (the spread of their noise);
* for the nominal study there is no order: a rater keeps the true type with a probability
  that falls with the item's difficulty and their error rate, and mistakes go mostly to the
  type the item can be mistaken for.

Written files per study folder: ``ratings.csv`` (long form ``item,rater,trial,rating``),
``reference.csv`` (``item,reference``) when the study has a reference, and ``items.csv``
(``item,reference,borderline``), the item list that ``reportgen plan --items`` reads.
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent


@dataclass(frozen=True)
class RaterModel:
    id: str
    strictness: float  # shift of the perceived position; + = stricter (calls items worse)
    error: float  # noise spread (ordered scales) or base error rate (nominal)


@dataclass(frozen=True)
class OrderedScenario:
    folder: str
    seed: int
    item_prefix: str
    n_items: int
    codes: tuple[str, ...]  # best first
    mix: tuple[float, ...]  # share of items whose reference is each category
    borderline_share: float
    raters: tuple[RaterModel, ...]
    trials: int
    reference: bool = True


@dataclass(frozen=True)
class NominalScenario:
    folder: str
    seed: int
    item_prefix: str
    n_items: int
    codes: tuple[str, ...]
    mix: tuple[float, ...]
    confusable: dict[str, str]  # type -> the type it is most often mistaken for
    borderline_share: float
    raters: tuple[RaterModel, ...]
    trials: int
    n_missing: int  # ratings left out at random (the rater skipped the item)
    reference: bool = False


# (a) Powder-coat finish on kitchen cabinet doors, four ordered grades, 4 graders, 2 trials.
FINISH = OrderedScenario(
    folder="finish-grading",
    seed=20261,
    item_prefix="DOOR-",
    n_items=48,
    codes=("1", "2", "3", "4"),
    mix=(0.30, 0.30, 0.25, 0.15),
    borderline_share=0.21,
    raters=(
        RaterModel("G1", strictness=0.00, error=0.10),
        RaterModel("G2", strictness=0.04, error=0.11),
        RaterModel("G3", strictness=-0.04, error=0.10),
        RaterModel("G4", strictness=0.02, error=0.12),
    ),
    trials=2,
)

# (b) Heat seal of sterile blister packs, accept/reject by eye under the light table.
SEAL = OrderedScenario(
    folder="seal-check",
    seed=20262,
    item_prefix="PK",
    n_items=50,
    codes=("ACC", "REJ"),
    mix=(0.62, 0.38),
    borderline_share=0.24,
    raters=(
        RaterModel("INS-A", strictness=0.03, error=0.04),  # on target
        RaterModel("INS-B", strictness=0.22, error=0.10),  # stricter: rejects good seals
        RaterModel("INS-C", strictness=-0.30, error=0.12),  # more lenient: lets weak seals pass
    ),
    trials=3,
)

# (c) Sorting returned garden-hose couplings by the kind of defect, one pass, no reference.
TRIAGE = NominalScenario(
    folder="defect-triage",
    seed=20263,
    item_prefix="RT-",
    n_items=64,
    codes=("CRK", "LEAK", "THR", "COS", "MIS"),
    mix=(0.20, 0.25, 0.20, 0.20, 0.15),
    confusable={"CRK": "LEAK", "LEAK": "CRK", "THR": "MIS", "MIS": "THR", "COS": "CRK"},
    borderline_share=0.20,
    raters=(
        RaterModel("T1", strictness=0.0, error=0.04),
        RaterModel("T2", strictness=0.0, error=0.05),
        RaterModel("T3", strictness=0.0, error=0.04),
        RaterModel("T4", strictness=0.0, error=0.06),
        RaterModel("T5", strictness=0.0, error=0.05),
    ),
    trials=1,
    n_missing=5,
)


def _counts(n: int, mix: tuple[float, ...]) -> list[int]:
    """Split n items into categories by the shares in mix (largest remainders)."""
    raw = np.asarray(mix, dtype=float) / sum(mix) * n
    out = np.floor(raw).astype(int)
    for k in np.argsort(-(raw - out), kind="stable")[: n - int(out.sum())]:
        out[k] += 1
    return [int(c) for c in out]


def _item_ids(prefix: str, n: int, rng: np.random.Generator) -> list[str]:
    """Item numbers as printed on the parts: increasing, with gaps (not 1..n)."""
    steps = rng.integers(1, 4, size=n)
    return [f"{prefix}{100 + int(s):03d}" for s in np.cumsum(steps)]


def simulate_ordered(sc: OrderedScenario) -> dict[str, list[list[str]]]:
    """Ordered bands: positions 0..K, band k is [k, k+1); limits at 1, 2, …, K-1."""
    rng = np.random.default_rng(sc.seed)
    k = len(sc.codes)
    ids = _item_ids(sc.item_prefix, sc.n_items, rng)
    ref = np.repeat(np.arange(k), _counts(sc.n_items, sc.mix))
    rng.shuffle(ref)
    n_border = round(sc.borderline_share * sc.n_items)
    border = np.zeros(sc.n_items, dtype=bool)
    border[rng.choice(sc.n_items, size=n_border, replace=False)] = True
    pos = np.empty(sc.n_items)
    for i in range(sc.n_items):
        if border[i]:
            # within 0.12 of a limit of its own band (the top/bottom band has one limit)
            limits = [x for x in (ref[i], ref[i] + 1) if 0 < x < k]
            lim = limits[int(rng.integers(len(limits)))]
            depth = rng.uniform(0.02, 0.12)
            pos[i] = lim + depth if lim == ref[i] else lim - depth
        else:
            pos[i] = ref[i] + rng.uniform(0.3, 0.7)
    difficulty = rng.lognormal(mean=0.0, sigma=0.35, size=sc.n_items)
    difficulty[border] *= 1.4

    rows: list[list[str]] = []
    for rater in sc.raters:
        for t in range(1, sc.trials + 1):
            noise = rng.normal(0.0, rater.error, size=sc.n_items) * difficulty
            seen = pos + rater.strictness + noise
            called = np.clip(np.floor(seen), 0, k - 1).astype(int)
            order = rng.permutation(sc.n_items)  # the order the rater worked through
            for i in order:
                rows.append([ids[i], rater.id, str(t), sc.codes[called[i]]])
    out = {
        "ratings.csv": [["item", "rater", "trial", "rating"], *rows],
        "items.csv": [["item", "reference", "borderline"]]
        + [[ids[i], sc.codes[ref[i]], "yes" if border[i] else "no"] for i in range(sc.n_items)],
    }
    if sc.reference:
        out["reference.csv"] = [["item", "reference"]] + [
            [ids[i], sc.codes[ref[i]]] for i in range(sc.n_items)
        ]
    return out


def simulate_nominal(sc: NominalScenario) -> dict[str, list[list[str]]]:
    rng = np.random.default_rng(sc.seed)
    k = len(sc.codes)
    ids = _item_ids(sc.item_prefix, sc.n_items, rng)
    truth = np.repeat(np.arange(k), _counts(sc.n_items, sc.mix))
    rng.shuffle(truth)
    n_border = round(sc.borderline_share * sc.n_items)
    border = np.zeros(sc.n_items, dtype=bool)
    border[rng.choice(sc.n_items, size=n_border, replace=False)] = True
    difficulty = rng.lognormal(mean=0.0, sigma=0.3, size=sc.n_items)
    difficulty[border] *= 3.0
    partner = {sc.codes.index(a): sc.codes.index(b) for a, b in sc.confusable.items()}

    called = np.empty((sc.n_items, len(sc.raters), sc.trials), dtype=int)
    for r, rater in enumerate(sc.raters):
        for t in range(sc.trials):
            p_wrong = np.minimum(rater.error * difficulty, 0.6)
            wrong = rng.random(sc.n_items) < p_wrong
            to_partner = rng.random(sc.n_items) < 0.75
            other = rng.integers(1, k, size=sc.n_items)  # a different type, uniformly
            for i in range(sc.n_items):
                if not wrong[i]:
                    called[i, r, t] = truth[i]
                elif to_partner[i]:
                    called[i, r, t] = partner[int(truth[i])]
                else:
                    called[i, r, t] = (truth[i] + other[i]) % k
    skipped: set[tuple[int, int, int]] = set()
    while len(skipped) < sc.n_missing:
        cell = (
            int(rng.integers(sc.n_items)),
            int(rng.integers(len(sc.raters))),
            int(rng.integers(sc.trials)),
        )
        skipped.add(cell)

    head = ["item", "rater", "rating"] if sc.trials == 1 else ["item", "rater", "trial", "rating"]
    rows: list[list[str]] = []
    for r, rater in enumerate(sc.raters):
        for t in range(sc.trials):
            for i in rng.permutation(sc.n_items):
                if (int(i), r, t) in skipped:
                    continue
                cell = [ids[i], rater.id] + ([] if sc.trials == 1 else [str(t + 1)])
                rows.append([*cell, sc.codes[called[i, r, t]]])
    out = {
        "ratings.csv": [head, *rows],
        "items.csv": [["item", "reference", "borderline"]]
        + [[ids[i], sc.codes[truth[i]], "yes" if border[i] else "no"] for i in range(sc.n_items)],
    }
    if sc.reference:
        out["reference.csv"] = [["item", "reference"]] + [
            [ids[i], sc.codes[truth[i]]] for i in range(sc.n_items)
        ]
    return out


# (d) and (e): measured reference values.  Each item has a measured value; a rater accepts it
# with a probability that falls off smoothly across the limit (a normal ogive around the
# rater's own switching point), independently in every trial.


@dataclass(frozen=True)
class MeasuredRater:
    id: str
    shift: float  # switching point minus the limit, in the unit of the values
    spread: float  # standard deviation of the ogive, in the unit (or in log units)


@dataclass(frozen=True)
class MeasuredScenario:
    folder: str
    seed: int
    item_prefix: str
    values: tuple[float, ...]  # the measured reference values, one per item
    decimals: int
    lower: float | None
    upper: float | None
    raters: tuple[MeasuredRater, ...]
    trials: int
    log_scale: bool = False  # the ogive on log values (flaw sizes)


# (d) No-go/go plug gauge on the bore of a pump housing, 12.000-12.018 mm; two setters check
# each of 16 master-measured bores 20 times.  The gauge's no-go side accepts bores slightly
# above the upper limit (a worn plug), which the study should show as a bias.
BORE = MeasuredScenario(
    folder="bore-plug-gauge",
    seed=20264,
    item_prefix="HB",
    values=(
        11.9950,
        11.9978,
        11.9985,
        11.9992,
        11.9999,
        12.0006,
        12.0013,
        12.0045,
        12.0135,
        12.0168,
        12.0175,
        12.0182,
        12.0189,
        12.0196,
        12.0203,
        12.0240,
    ),
    decimals=4,
    lower=12.000,
    upper=12.018,
    raters=(
        MeasuredRater("SET-1", shift=0.0003, spread=0.0011),
        MeasuredRater("SET-2", shift=0.0006, spread=0.0014),
    ),
    trials=20,
)

# (e) Pores in the powder coat of garden-furniture frames: pores of 100 um and more reject
# the part.  Three inspectors look at 36 marked pores (sizes measured under the microscope)
# six times each, in shuffled order; inspector V3 tends to overlook small pores.
PORES = MeasuredScenario(
    folder="coating-pores",
    seed=20265,
    item_prefix="PO-",
    values=tuple(float(round(20 * (400 / 20) ** (i / 35), 0)) for i in range(36)),
    decimals=0,
    lower=None,
    upper=100.0,
    raters=(
        MeasuredRater("V1", shift=-0.05, spread=0.22),
        MeasuredRater("V2", shift=0.00, spread=0.28),
        MeasuredRater("V3", shift=0.25, spread=0.30),
    ),
    trials=6,
    log_scale=True,
)


def simulate_measured(sc: MeasuredScenario) -> dict[str, list[list[str]]]:
    """ratings.csv (ACC/REJ), reference.csv, values.csv and items.csv of one scenario."""
    from statistics import NormalDist

    rng = np.random.default_rng(sc.seed)
    n = len(sc.values)
    ids = _item_ids(sc.item_prefix, n, rng)
    order = rng.permutation(n)  # item numbers are not in value order
    values = [sc.values[int(k)] for k in order]

    def ref(v: float) -> str:
        bad = (sc.lower is not None and v < sc.lower) or (sc.upper is not None and v > sc.upper)
        return "REJ" if bad else "ACC"

    phi = NormalDist().cdf
    rows: list[list[str]] = []
    for r in sc.raters:
        for t in range(1, sc.trials + 1):
            for i in rng.permutation(n):
                v = values[int(i)]
                p_acc = 1.0
                if sc.upper is not None:
                    if sc.log_scale:
                        p_acc *= phi((np.log(sc.upper) + r.shift - np.log(v)) / r.spread)
                    else:
                        p_acc *= phi((sc.upper + r.shift - v) / r.spread)
                if sc.lower is not None:
                    p_acc *= phi((v - (sc.lower - r.shift)) / r.spread)
                call = "ACC" if rng.random() < p_acc else "REJ"
                rows.append([ids[int(i)], r.id, str(t), call])
    fmt = f"{{:.{sc.decimals}f}}"
    by_id = sorted(range(n), key=lambda i: ids[i])
    return {
        "ratings.csv": [["item", "rater", "trial", "rating"]] + rows,
        "reference.csv": [["item", "reference"]] + [[ids[i], ref(values[i])] for i in by_id],
        "values.csv": [["item", "value"]] + [[ids[i], fmt.format(values[i])] for i in by_id],
        "items.csv": [["item", "reference", "borderline"]]
        + [[ids[i], ref(values[i]), "no"] for i in by_id],
    }


def _csv_text(rows: list[list[str]]) -> str:
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerows(rows)
    return buf.getvalue()


def generate() -> dict[Path, str]:
    """Every generated file, path -> text (nothing written)."""
    files: dict[Path, str] = {}
    for sc in (FINISH, SEAL):
        for name, rows in simulate_ordered(sc).items():
            files[HERE / sc.folder / name] = _csv_text(rows)
    for name, rows in simulate_nominal(TRIAGE).items():
        files[HERE / TRIAGE.folder / name] = _csv_text(rows)
    for msc in (BORE, PORES):
        for name, rows in simulate_measured(msc).items():
            files[HERE / msc.folder / name] = _csv_text(rows)
    return files


def main() -> None:
    for path, text in generate().items():
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(text.encode("utf-8"))
        print(f"wrote {path.relative_to(HERE.parent)}")  # noqa: T201


if __name__ == "__main__":
    main()
