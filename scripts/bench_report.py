"""How long the report takes to draw, and its peak memory, for 10, 100 and 1,000 corners.

Run:  .venv/bin/python scripts/bench_report.py            # all three
      .venv/bin/python scripts/bench_report.py 1000       # one of them

Each job (the demo, and the demo's amplifier over a corner grid of 100 or 1,000 corners)
is tuned into a fresh out folder (loop gains, maps and a step check per corner: what a
report of that many corners reads), then the report is drawn from the out folder by
`amploop report` in a process of its own, once with the PNG copies and once PDF only. The
figures printed are that process's wall time and its peak resident memory (the kernel's
ru_maxrss of the child). No simulation happens while drawing.
"""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_measure import DEMO, job_with_corners, scratch

GRID_100 = ('[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, 0, 27, 85, 125]\n'
            'params = { vdd = [1.71, 1.8, 1.89, 1.98, 1.75], cl = ["1p", "3p"] }\n')
GRID_1000 = ('[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, -20, 0, 15, 27, 50, 70, 85, 105, 125]\n'
             'params = { vdd = [1.71, 1.75, 1.8, 1.85, 1.89], cl = ["1p", "1.2p", "1.4p", '
             '"1.6p", "1.8p", "2p", "2.2p", "2.5p", "2.8p", "3p"] }\n')
GRIDS = {"10": None, "100": GRID_100, "1000": GRID_1000}


def draw(out: Path, *options: str) -> tuple[float, float, str]:
    """Wall time (s) and peak resident memory (MiB) of `amploop report` in a process of
    its own, and what it printed."""
    said, errors = out / "bench-stdout.txt", out / "bench-stderr.txt"
    start = time.perf_counter()
    with open(said, "w") as stdout, open(errors, "w") as stderr:
        child = subprocess.Popen([sys.executable, "-m", "amploop.cli", "report", str(out),
                                  *options], stdout=stdout, stderr=stderr)
        _, status, usage = os.wait4(child.pid, 0)
    seconds = time.perf_counter() - start
    if os.waitstatus_to_exitcode(status) != 0:
        raise SystemExit(f"amploop report failed: {errors.read_text().strip()}")
    return seconds, usage.ru_maxrss / 1024, said.read_text().strip()


def main(which: list[str]) -> None:
    from amploop.spec.job import load_job
    from amploop.strategy.tune import tune

    with scratch() as tmp:
        for count in which:
            grid = GRIDS[count]
            if grid is not None:
                (Path(tmp) / count).mkdir()
            path = DEMO if grid is None else job_with_corners(Path(tmp) / count, grid)
            job = load_job(path)
            out = Path(tmp) / f"out-{count}"
            start = time.perf_counter()
            tune(job, out=out)
            tuned = time.perf_counter() - start
            reads = json.loads((out / "results.json").read_text())["ac_analyses"]
            png_s, png_mib, _ = draw(out)
            pngs = len(list((out / "report").glob("page-*.png")))
            pdf_s, pdf_mib, said = draw(out, "--no-png")
            pages = said.split("(", 1)[1].split(" pages")[0]
            print(f"{len(job.corners)} corners: tune {tuned:.1f} s ({reads['run']} AC analyses); "
                  f"report {pages} pages: {png_s:.1f} s and {png_mib:.0f} MiB peak with "
                  f"{pngs} PNGs, {pdf_s:.1f} s and {pdf_mib:.0f} MiB peak PDF only; none "
                  "simulated", flush=True)


if __name__ == "__main__":
    main(sys.argv[1:] or list(GRIDS))
