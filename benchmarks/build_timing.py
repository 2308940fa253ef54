"""Time the user's commands, each next to its floor: WeasyPrint rendering the finished HTML alone.

Every command runs as a new process (imports count, as for a user), ``runs`` times, interleaved
with its floor so that machine load hits both alike.  Printed per row: median wall time, median
CPU time (user + system of the child: steadier than wall time when other jobs share the cores),
and the same two for the floor.

Rows:

* ``build <study>`` for each demo study in ``studies/`` and for a *typical* study made here
  (50 items × 3 raters × 3 trials, seeded, invented: the finish-grading definition with three
  raters and three trials) — read, analyse, judge, charts, HTML, PDF/A-3b, folder write.
  Floor: ``weasyprint.HTML(filename=<the built .html>).write_pdf(…)`` in a new process.
* ``make demo`` — ``python -m reportgen demo`` (every demo study).  Floor: the report HTMLs of
  all demo studies rendered by WeasyPrint in one process.
* ``plan <study> (PDFs)`` — ``reportgen plan --items …`` with run-sheet PDFs.  Floor: every
  run sheet's HTML rendered by WeasyPrint in one process.
* ``verify <study>`` — ``reportgen verify`` on the typical study's built report.  Floor: as
  for its build.

``stats --json`` on 1.9 M ratings is timed by ``benchmarks/end_to_end.py`` (against a peer
pipeline, with peak memory).

Run: ``.venv/bin/python benchmarks/build_timing.py [runs]`` (default 5).
"""

from __future__ import annotations

import os
import re
import resource
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[1]
WHEN = "2026-11-20T09:00:00Z"
PY = sys.executable
FLOOR = (
    "import sys, weasyprint\n"
    "for n, f in enumerate(sys.argv[2:]):\n"
    "    weasyprint.HTML(filename=f).write_pdf(f'{sys.argv[1]}/floor-{n}.pdf')\n"
)


def timed(args: list[str]) -> tuple[float, float]:
    """(wall seconds, CPU seconds of the child) of one command, which must exit 0."""
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    r = subprocess.run(
        args, capture_output=True, text=True, cwd=REPO, env=dict(os.environ, CI="true")
    )
    wall = time.perf_counter() - t
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if r.returncode != 0:
        raise SystemExit(f"failed ({r.returncode}): {' '.join(args)}\n{r.stderr[-2000:]}")
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu


def floor(out: Path, htmls: list[Path]) -> tuple[float, float]:
    out.mkdir(parents=True, exist_ok=True)
    return timed([PY, "-c", FLOOR, str(out), *map(str, htmls)])


def make_typical(folder: Path) -> Path:
    """A 50 × 3 × 3 study: finish-grading's definition, three raters, three trials, new data."""
    src = (REPO / "studies" / "finish-grading" / "study.yaml").read_text(encoding="utf-8")
    text = re.sub(r"  - \{id: G4[^\n]*\n", "", src)
    text = re.sub(r"\ntrials: 2\n", "\ntrials: 3\n", text)
    text = text.replace("id: FINISH-GRADE-DEMO", "id: TYPICAL-50-3-3")
    assert "G4" not in text and "trials: 3" in text, "finish-grading changed shape"
    folder.mkdir(parents=True)
    (folder / "study.yaml").write_text(text, encoding="utf-8")
    rng = np.random.default_rng(20261203)
    ref = rng.choice(4, size=50, p=[0.4, 0.3, 0.2, 0.1]) + 1
    rows, refs = [], []
    for i, r in enumerate(ref):
        refs.append(f"D{i + 1:03d},{r}\n")
        for rater in ("G1", "G2", "G3"):
            for trial in (1, 2, 3):
                v = int(np.clip(r + rng.choice([-1, 0, 0, 0, 0, 0, 1]), 1, 4))
                rows.append(f"D{i + 1:03d},{rater},{trial},{v}\n")
    (folder / "ratings.csv").write_text("item,rater,trial,rating\n" + "".join(rows))
    (folder / "reference.csv").write_text("item,reference\n" + "".join(refs))
    return folder / "study.yaml"


def row(
    label: str,
    runs: int,
    command: Callable[[int], tuple[float, float]],
    base: Callable[[int], tuple[float, float]],
) -> None:
    got, floors = [], []
    for n in range(runs):
        got.append(command(n))
        floors.append(base(n))
    w = statistics.median(g[0] for g in got)
    c = statistics.median(g[1] for g in got)
    fw = statistics.median(f[0] for f in floors)
    fc = statistics.median(f[1] for f in floors)
    print(f"{label:<34} {w:>7.2f}s {c:>7.2f}s {fw:>7.2f}s {fc:>7.2f}s {w / fw:>6.2f}", flush=True)


def main(runs: int = 5) -> None:
    print(
        f"load average at start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} cores; {runs} runs each"
    )
    print(f"{'command':<34} {'wall':>8} {'cpu':>8} {'floor':>8} {'f.cpu':>8} {'ratio':>6}")
    tmp = Path(tempfile.mkdtemp(prefix="reportgen-timing-"))
    try:
        studies = sorted((REPO / "studies").glob("*/study.yaml"))
        typical = make_typical(tmp / "typical")
        built: dict[str, Path] = {}
        for study in [typical, *studies]:
            name = study.parent.name

            def build(n: int, study: Path = study, name: str = name) -> tuple[float, float]:
                out = tmp / f"build-{name}-{n}"
                res = timed(
                    [
                        PY,
                        "-m",
                        "reportgen",
                        "build",
                        str(study),
                        "-o",
                        str(out),
                        "--generated-at",
                        WHEN,
                        "--quiet",
                    ]
                )
                built[name] = next(out.rglob("*.pdf"))
                return res

            def build_floor(n: int, name: str = name) -> tuple[float, float]:
                return floor(tmp / f"floor-{name}-{n}", [built[name].with_suffix(".html")])

            row(f"build {name}", runs, build, build_floor)

        def demo(n: int) -> tuple[float, float]:
            return timed([PY, "-m", "reportgen", "demo", "--output", str(tmp / f"demo-{n}")])

        def demo_floor(n: int) -> tuple[float, float]:
            htmls = sorted((tmp / "demo-0").rglob("*-rev*.html"))
            return floor(tmp / f"floor-demo-{n}", htmls)

        row("make demo (all demo studies)", runs, demo, demo_floor)

        for study in studies:
            items = study.parent / "items.csv"
            if not items.is_file():
                continue
            name = study.parent.name

            def plan(
                n: int, study: Path = study, items: Path = items, name: str = name
            ) -> tuple[float, float]:
                return timed(
                    [
                        PY,
                        "-m",
                        "reportgen",
                        "plan",
                        str(study),
                        "--items",
                        str(items),
                        "--output",
                        str(tmp / f"plan-{name}-{n}"),
                        "--start",
                        "2026-11-20",
                        "--quiet",
                    ]
                )

            def plan_floor(n: int, name: str = name) -> tuple[float, float]:
                htmls = sorted((tmp / f"plan-{name}-0").rglob("sheets/*.html"))
                return floor(tmp / f"floor-plan-{name}-{n}", htmls)

            row(f"plan {name} (PDFs)", runs, plan, plan_floor)

        report = built["typical"]

        def verify(n: int) -> tuple[float, float]:
            return timed([PY, "-m", "reportgen", "verify", str(report)])

        def verify_floor(n: int) -> tuple[float, float]:
            return floor(tmp / f"floor-verify-{n}", [report.with_suffix(".html")])

        row("verify typical", runs, verify, verify_floor)
        print(f"load average at end: {os.getloadavg()[0]:.2f}")
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5)
