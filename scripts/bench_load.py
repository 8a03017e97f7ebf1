"""A 500-corner measurement on 2 workers: completes, with peak memory reported.

Run:  .venv/bin/python scripts/bench_load.py

The demo amplifier over a 500-corner grid (tt/ss × 5 temperatures × 5 supplies × 10 loads),
measured by `amploop measure --workers 2 --no-report` in a fresh process; peak RSS summed
over the process tree (coordinator, fork server, workers), sampled from /proc. For scale,
the same for a 10-corner grid.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_measure import job_with_corners, run_watched, scratch

GRID_500 = ('[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, 0, 27, 85, 125]\n'
            'params = { vdd = [1.71, 1.75, 1.8, 1.85, 1.89], '
            'cl = ["1p", "1.2p", "1.4p", "1.6p", "1.8p", "2p", "2.2p", "2.4p", "2.6p", "3p"] }\n')
GRID_10 = ('[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, 0, 27, 85, 125]\n'
           'params = { vdd = [1.8], cl = ["2p"] }\n')


def run(grid: str, tmp: Path, label: str) -> None:
    folder = tmp / label
    folder.mkdir()
    job = job_with_corners(folder, grid)
    start = time.perf_counter()
    out, peaks = run_watched([sys.executable, "-m", "amploop.cli", "measure", str(job), "--out",
                              str(folder / "out"), "--workers", "2", "--no-report", "--json"])
    wall = time.perf_counter() - start
    summary = out.strip().splitlines()[-1]
    import json

    data = json.loads(summary)
    corners = len(json.loads((folder / "out" / "results.json").read_text())["corners"])
    print(f"{label}: {corners} corners, status {data['status']}, "
          f"{data['ac_analyses']['run']} AC analyses, {wall:.1f} s, exit 0; "
          f"peak RSS {sum(peaks.values()) / 1024:.1f} MiB over {len(peaks)} processes")


def main() -> None:
    with scratch() as tmp:
        run(GRID_10, Path(tmp), "10-corner")
        run(GRID_500, Path(tmp), "500-corner")


if __name__ == "__main__":
    main()
