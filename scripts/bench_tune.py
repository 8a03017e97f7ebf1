"""Benchmarks of `amploop tune` on the demo job: analyses to converge, bandwidth, wall time.

Run:  .venv/bin/python scripts/bench_tune.py

- AC analyses to converge (counts are the same on any machine): the map strategy
  (characterisation plus verification; target <= 10 per corner), the textbook procedure
  and scipy's COBYLA optimiser driving simulations, side by side on the same job.
- Bandwidth at the chosen point: worst-corner unity-gain frequency and phase margin of each.
- Wall time of the map strategy with all cores vs one worker, and the share of the wall
  time the workers spent inside ngspice.
- Settling: the map strategy with objective "bandwidth" and with objective "settling" at
  the same margin targets, each verified by the step transients at every corner: the worst
  simulated settling time, its crossover and phase margin, and the largest difference
  between the predicted and the simulated settling time.
Every run uses a fresh out folder (nothing reused) and, but for the settling comparison,
tunes only (no step check, no report, whose extra analyses would blur the counts).
"""

from __future__ import annotations

import os
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from bench_measure import DEMO, scratch


def main() -> None:
    from amploop.sim.pool import default_workers
    from amploop.spec.job import load_job
    from amploop.spice.units import describe_values, engineering
    from amploop.strategy.tune import tune

    job = load_job(DEMO)
    corners = len(job.corners)
    print(f"machine: {os.cpu_count()} CPUs; demo job: {corners} corners, target "
          f"{job.target.phase_margin_deg:g}° ± {job.target.tolerance_deg:g}°, GM ≥ {job.target.gain_margin_db:g} dB")
    print(f"{'strategy':<10} {'status':<10} {'AC':>5} {'AC/corner':>9} {'points':>6} "
          f"{'worst PM':>9} {'worst UGF':>10}  values")
    with scratch() as tmp:
        for strategy in ("map", "textbook", "optimizer"):
            result = tune(job, out=Path(tmp) / strategy, strategy=strategy,
                          workers=default_workers(), time_domain=False)
            worst = result.outcome.final.worst
            total = result.ac_run + result.ac_reused
            values = describe_values(result.outcome.values)
            print(f"{strategy:<10} {result.status:<10} {total:>5} {total / corners:>9.1f} "
                  f"{len(result.history):>6} {worst.phase_margin_deg:>8.2f}° "
                  f"{engineering(worst.unity_gain_hz, 'Hz'):>10}  {values}")
        settling_objectives(job, Path(tmp))
        walls = {}
        shares = {}
        for workers in (default_workers(), 1):
            times, inside = [], []
            for rep in range(5):
                start = time.perf_counter()
                result = tune(job, out=Path(tmp) / f"w{workers}r{rep}", workers=workers,
                              time_domain=False)
                wall = time.perf_counter() - start
                times.append(wall)
                inside.append(result.simulator_seconds / (wall * workers))
            walls[workers] = statistics.median(times)
            shares[workers] = statistics.median(inside)
    n = default_workers()
    print(f"map wall time (median of 5): {n} workers {walls[n]:.2f} s, 1 worker {walls[1]:.2f} s, "
          f"speed-up {walls[1] / walls[n]:.2f}x")
    print(f"share of wall time inside ngspice (per worker): {n} workers {shares[n]:.0%}, "
          f"1 worker {shares[1]:.0%}")


def settling_objectives(job, tmp: Path) -> None:
    """Print the worst-corner simulated settling of both objectives on ``job`` (step checks
    at every corner), with the analyses each took and the prediction's agreement."""
    from dataclasses import replace

    from amploop.sim.pool import default_workers
    from amploop.spice.units import engineering
    from amploop.strategy.tune import tune

    print(f"{'objective':<10} {'status':<10} {'AC':>5} {'tran':>5} {'worst settling':>15} "
          f"{'worst UGF':>10} {'worst PM':>9}  agreement (predicted/simulated - 1)")
    for objective in ("bandwidth", "settling"):
        result = tune(replace(job, target=replace(job.target, objective=objective)),
                      out=tmp / f"objective-{objective}", workers=default_workers())
        times = {n: c.metrics and c.metrics.settling_s for n, c in result.step_checks.items()}
        slowest = max(times, key=lambda n: times[n] or float("inf"))
        worst = result.outcome.final.worst
        agreement = result.as_json()["settling_prediction"]
        text = "-"
        if agreement:
            rel = [a["relative"] for a in agreement.values() if a["relative"] is not None]
            text = (f"slowest corner {agreement[slowest]['relative']:+.2%}, all corners "
                    f"{min(rel):+.1%} .. {max(rel):+.1%}")
        print(f"{objective:<10} {result.status:<10} {result.ac_run + result.ac_reused:>5} "
              f"{result.transient_run + result.transient_reused:>5} "
              f"{engineering(times[slowest], 's'):>15} "
              f"{engineering(worst.unity_gain_hz, 'Hz'):>10} {worst.phase_margin_deg:>8.2f}°  {text}")


if __name__ == "__main__":
    main()
