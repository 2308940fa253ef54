"""Time `reportgen build` against the floor: WeasyPrint rendering the finished HTML alone.

For each demo study (studies/*/study.yaml), in one run and interleaved so that machine load
hits both alike:

* build — ``python -m reportgen build STUDY --generated-at … -o <fresh dir>``: read, analyse,
  judge, charts, HTML, PDF/A-3b with attachments, atomic folder write (a new process each time,
  so imports count, as for a user);
* floor — ``python -c 'weasyprint.HTML(filename=<the built .html>).write_pdf(…)'`` in a new
  process: the cost of turning the finished report HTML into a PDF and nothing else.

Prints the median of each and their ratio.  Run: ``.venv/bin/python benchmarks/build_timing.py [runs]``.
"""

from __future__ import annotations

import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
WHEN = "2026-11-20T09:00:00Z"
FLOOR = "import sys, weasyprint; weasyprint.HTML(filename=sys.argv[1]).write_pdf(sys.argv[2])"


def timed(args: list[str]) -> float:
    t = time.perf_counter()
    r = subprocess.run(args, capture_output=True, text=True, env=dict(os.environ, CI="true"))
    if r.returncode != 0:
        raise SystemExit(f"failed ({r.returncode}): {' '.join(args)}\n{r.stderr}")
    return time.perf_counter() - t


def main(runs: int = 5) -> None:
    py = sys.executable
    print(f"{'study':<22} {'build median':>13} {'floor median':>13} {'ratio':>6}")
    for study in sorted((REPO / "studies").glob("*/study.yaml")):
        builds, floors = [], []
        with tempfile.TemporaryDirectory() as tmp:
            for n in range(runs):
                out = Path(tmp) / f"b{n}"
                builds.append(
                    timed(
                        [
                            py,
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
                )
                html = next(out.rglob("*.html"))
                floors.append(timed([py, "-c", FLOOR, str(html), str(Path(tmp) / f"f{n}.pdf")]))
        b, f = statistics.median(builds), statistics.median(floors)
        print(f"{study.parent.name:<22} {b:>12.2f}s {f:>12.2f}s {b / f:>6.2f}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 5)
