"""Benchmark of `--cluster`: a 200-corner measurement on a local two-worker Dask cluster
against the local process pool with two workers.

Run:  .venv/bin/python scripts/bench_cluster.py [--reps N]

The demo job with its corners replaced by a 200-corner grid (as scripts/bench_measure.py
builds it), measured with `time_domain=False` (two AC analyses per corner, no step
checks), each time into a fresh out folder so that nothing is reused. Both pools are
started and warmed up (one measurement each) before the timed runs; the Dask cluster runs
on 127.0.0.1 with two worker processes of one thread each, no dashboard. Reported: the
median wall time of each, the throughput (corners per second) and the ratio of the
cluster's throughput to the local pool's, all from this one run.

What the ratio shows is the cluster's overhead per analysis (scheduler round trip,
sending the deck and the included files, writing them on the worker, the result arrays
back) against the analysis itself: on the demo's level-1 cards an analysis is a few
milliseconds, so this is the worst case; costlier models hide more of it (a second run on
the 45 nm BSIM4 cards of ../shared, when present, shows that). The machine is noisy: quote
the ratios from one run.
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

from bench_measure import DEMO, GRID_200, PTM45, job_with_corners, scratch

GRID_PTM_200 = ('[corner_grid]\ntemp = [-40, 0, 27, 85, 125]\n'
                'params = { vdd = [1.0, 1.05, 1.1, 1.15, 1.2], '
                'cl = ["0.5p", "0.75p", "1p", "1.25p", "1.5p", "1.75p", "2p", "2.5p"] }\n')


def timed(job, pool, folder: Path, reps: int) -> tuple[float, int]:
    """Median seconds of ``reps`` measurements of ``job`` on ``pool``; AC analyses run."""
    from amploop.corners.measure import measure

    measure(job, out=folder / "warm", pool=pool, time_domain=False)
    times = []
    for rep in range(reps):
        started = time.perf_counter()
        result = measure(job, out=folder / f"rep{rep}", pool=pool, time_domain=False)
        times.append(time.perf_counter() - started)
        assert result.ac_reused == 0 and result.status == "ok", result.status
    return statistics.median(times), result.ac_run


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=3)
    args = parser.parse_args()

    from distributed import LocalCluster

    from amploop.sim.cluster import ClusterPool
    from amploop.sim.pool import WorkerPool
    from amploop.spec.job import load_job

    print(f"machine: {os.cpu_count()} CPUs; python {sys.version.split()[0]}")
    runs = [("demo, level-1 cards", DEMO, GRID_200)]
    if PTM45.is_file():
        runs.append(("ptm45, BSIM4 cards", PTM45, GRID_PTM_200))
    else:
        print("(the 45 nm BSIM4 run needs netlists/ptm45: skipped)")
    with scratch() as tmp, \
            LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                         dashboard_address=None, scheduler_kwargs={"dashboard_address": ":0"},
                         local_directory=str(Path(tmp) / "dask")) as cluster, \
            ClusterPool(cluster.scheduler_address) as cluster_pool, WorkerPool(2) as local_pool:
        for title, job_file, grid in runs:
            folder = Path(tmp) / job_file.parent.name
            folder.mkdir()
            job = load_job(job_with_corners(folder, grid, job_file))
            local_s, analyses = timed(job, local_pool, folder / "local", args.reps)
            cluster_s, cluster_analyses = timed(job, cluster_pool, folder / "cluster", args.reps)
            assert cluster_analyses == analyses
            corners = len(job.corners)
            print(f"{title}: {corners} corners, {analyses} AC analyses per measurement, "
                  f"median of {args.reps}")
            print(f"  local WorkerPool(2):                {local_s:6.2f} s  "
                  f"{corners / local_s:6.1f} corners/s")
            print(f"  LocalCluster, 2 workers x 1 thread: {cluster_s:6.2f} s  "
                  f"{corners / cluster_s:6.1f} corners/s")
            print(f"  throughput ratio cluster/local: {local_s / cluster_s:.2f}")


if __name__ == "__main__":
    main()
