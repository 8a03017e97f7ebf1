"""How long the report takes to draw, for the demo job and for a 100-corner job.

Run:  .venv/bin/python scripts/bench_report.py

Each job is measured (loop gain and step check per corner) into a fresh out folder, then
the report is drawn from the out folder as `amploop report` does: once with the PNG
copies, once PDF only. No simulation happens while drawing (the analyses read from the
journal are counted).
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
from bench_measure import DEMO, job_with_corners, scratch

GRID_100 = ('[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, 0, 27, 85, 125]\n'
            'params = { vdd = [1.71, 1.8, 1.89, 1.98, 1.75], cl = ["1p", "3p"] }\n')


def main() -> None:
    from amploop.job import load_job
    from amploop.report import build_report
    from amploop.tune import tune

    with scratch() as tmp:
        for label, path in (("demo (10 corners)", DEMO),
                            ("100 corners", job_with_corners(Path(tmp), GRID_100))):
            job = load_job(path)
            out = Path(tmp) / label.split()[0]
            start = time.perf_counter()
            tune(job, out=out)
            tuned = time.perf_counter() - start
            with_png = build_report(out, pngs=True)
            pdf_only = build_report(out, pngs=False)
            print(f"{label}: tune {tuned:.1f} s; report {with_png.pages} pages: "
                  f"{with_png.seconds:.1f} s with {len(with_png.pngs)} PNGs, "
                  f"{pdf_only.seconds:.1f} s PDF only; {pdf_only.analyses_read} analyses read "
                  f"from the journal, none simulated")


if __name__ == "__main__":
    main()
