"""Analyses on a Dask cluster (``--cluster``): the same answers as the local pool.

The reference is a local run of the same job through :class:`amploop.sim.pool.WorkerPool`:
through a two-worker Dask cluster on 127.0.0.1 the tuning must land on identical values,
per-corner margins, journal keys and analysis counts, also when a Dask worker process is
killed in the middle of a batch. Bundling is checked against the simulator itself: an
analysis whose files were moved away after bundling must give the arrays it gave before.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import time
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

distributed = pytest.importorskip("distributed")

from conftest import DEMO

from amploop.bench.amplifier import prepare_amplifier
from amploop.bench.requests import AnalysisOutput, AnalysisRequest, Step
from amploop.bench.testbench import build_testbench
from amploop.cli import main
from amploop.errors import SimulatorError
from amploop.sim import cluster as cluster_module
from amploop.sim.bundles import FileBundler, include_targets
from amploop.sim.cluster import ClusterPool, run_analysis
from amploop.sim.pool import WorkerPool
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

# an RC driven by a sine: one `tran` that takes about two seconds and keeps few points
SLOW = AnalysisRequest("slow", "* slow\nV1 a 0 sin(0 1 1meg)\nR1 a b 1k\nC1 b 0 1n\n.end\n",
                       (Step("tran 1n 0.8m 0.799m", ("v(b)",)),), time_limit_s=60.0)
FAST = AnalysisRequest("fast", "* fast\nV1 a 0 dc 1\nR1 a 0 1k\n.end\n",
                       (Step("op", ("i(v1)",)),), time_limit_s=60.0)


def local_cluster(tmp: Path, workers: int = 2):
    """Dask worker processes with one thread each on 127.0.0.1, no dashboard (and the
    scheduler's remaining HTTP routes on a free port, not 8787)."""
    return distributed.LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                    host="127.0.0.1", dashboard_address=None,
                                    scheduler_kwargs={"dashboard_address": ":0"},
                                    local_directory=str(tmp))


@pytest.fixture(scope="module")
def cluster(tmp_path_factory):
    with local_cluster(tmp_path_factory.mktemp("dask")) as running:
        yield running


@pytest.fixture(scope="module")
def local_demo(tmp_path_factory):
    """The demo tuned by the local pool: the reference."""
    with WorkerPool(2) as pool:
        return tune(load_job(DEMO / "job.toml"), out=tmp_path_factory.mktemp("local") / "out",
                    pool=pool)


def same_tuning(got, reference) -> None:
    assert got.status == reference.status == "converged"
    assert got.outcome.values == reference.outcome.values
    assert [c.as_json() for c in got.corners] == [c.as_json() for c in reference.corners]
    assert (got.ac_run, got.ac_reused) == (reference.ac_run, reference.ac_reused)
    assert (got.transient_run, got.transient_reused) == (reference.transient_run,
                                                         reference.transient_reused)
    # the history names every analysis by its journal key
    assert [h.as_json() for h in got.history] == [h.as_json() for h in reference.history]


def test_demo_tuning_on_the_cluster_matches_the_local_run(cluster, local_demo, tmp_path):
    with ClusterPool(cluster.scheduler_address) as pool:
        assert pool.size == 2
        result = tune(load_job(DEMO / "job.toml"), out=tmp_path / "out", pool=pool)
    same_tuning(result, local_demo)
    steps = {name: check.metrics for name, check in result.step_checks.items()}
    assert steps == {name: check.metrics for name, check in local_demo.step_checks.items()}


def test_measure_command_with_cluster_option(cluster, local_demo, tmp_path):
    args = ["measure", str(DEMO / "job.toml"), "--quiet", "--no-report", "--set", "cc=1p"]
    assert main(args + ["--out", str(tmp_path / "local"), "--workers", "2"]) == 0
    assert main(args + ["--out", str(tmp_path / "dask"), "--cluster",
                        cluster.scheduler_address]) == 0
    local, dask = (json.loads((tmp_path / d / "results.json").read_text())["corners"]
                   for d in ("local", "dask"))
    assert dask == local


def test_a_fully_differential_tuning_on_the_cluster_matches_the_local_run(cluster, tmp_path):
    """The invented fully-differential demo, both loops, tuned on Dask and locally."""
    job = load_job(Path(__file__).parent.parent / "netlists" / "fd_demo" / "job.toml")
    with WorkerPool(2) as pool:
        local = tune(job, out=tmp_path / "local", pool=pool, time_domain=False)
    with ClusterPool(cluster.scheduler_address) as pool:
        dask = tune(job, out=tmp_path / "dask", pool=pool, time_domain=False)
    assert local.corners[0].common_mode is not None
    same_tuning(dask, local)


def test_time_limit_is_enforced_inside_the_task(cluster):
    with ClusterPool(cluster.scheduler_address) as pool:
        started = time.monotonic()
        results = dict(pool.run([("slow", replace(SLOW, time_limit_s=0.3)), ("fast", FAST)]))
    assert time.monotonic() - started < 1.5
    assert isinstance(results["slow"], SimulatorError)
    assert "time-out" in results["slow"].problem
    assert isinstance(results["fast"], AnalysisOutput)


class KillingPool:
    """A ClusterPool that SIGKILLs a busy Dask worker process after the third result."""

    def __init__(self, pool: ClusterPool) -> None:
        self.pool, self.size, self.killed = pool, pool.size, None

    def run(self, requests):
        for n, item in enumerate(self.pool.run(requests)):
            if n == 2 and self.killed is None:
                self.killed = kill_busy_worker(self.pool.client)
            yield item


def kill_busy_worker(client) -> int:
    """The pid of a Dask worker process that had tasks, killed with SIGKILL."""
    busy = [address for address, keys in client.processing().items() if keys]
    assert busy, "no worker had work in flight"
    pid = client.run(os.getpid, workers=busy[:1])[busy[0]]
    os.kill(pid, signal.SIGKILL)
    return pid


def test_a_worker_killed_mid_run_costs_a_retry_and_the_run_completes(cluster, local_demo,
                                                                      tmp_path):
    with ClusterPool(cluster.scheduler_address) as pool:
        killing = KillingPool(pool)
        result = tune(load_job(DEMO / "job.toml"), out=tmp_path / "out", pool=killing)
        assert killing.killed is not None
        assert killing.killed not in pool.client.run(os.getpid).values()
    assert result.status == "converged"
    assert result.outcome.values == local_demo.outcome.values
    assert [c.as_json() for c in result.corners] == [c.as_json() for c in local_demo.corners]
    assert result.ac_run == local_demo.ac_run


def test_analysis_whose_worker_keeps_dying_reports_an_error_and_the_rest_goes_on(tmp_path):
    import dask

    with dask.config.set({"distributed.scheduler.allowed-failures": 0}), \
            local_cluster(tmp_path) as running, ClusterPool(running.scheduler_address) as pool:
        results = {}
        for key, output in pool.run([("slow", SLOW), ("fast", FAST)]):
            results[key] = output
            if key == "fast":  # the slow one is running on the other worker now
                kill_busy_worker(pool.client)
    assert isinstance(results["fast"], AnalysisOutput)
    assert isinstance(results["slow"], SimulatorError)
    assert "died" in results["slow"].problem and "KilledWorker" in results["slow"].problem
    assert results["slow"].place == "slow"


def test_unreachable_scheduler_and_empty_cluster_are_one_line_errors(tmp_path):
    with pytest.raises(SimulatorError, match="cannot reach the Dask scheduler"):
        ClusterPool("tcp://127.0.0.1:9", timeout_s=1)
    with local_cluster(tmp_path, workers=0) as empty, \
            pytest.raises(SimulatorError, match="has no workers"):
        ClusterPool(empty.scheduler_address, timeout_s=1)


def test_without_distributed_the_option_is_a_one_line_error(monkeypatch):
    import sys

    monkeypatch.setitem(sys.modules, "distributed", None)
    with pytest.raises(SimulatorError, match="needs the Python package 'distributed'"):
        ClusterPool("tcp://127.0.0.1:8786")


def test_include_scanning():
    text = ('.include "/a b/x.cir"\n  .INC /y.inc ; comment\n.lib \'/m.lib\' tt\n'
            '.lib tt\n* .include "/not.cir"\n.incl rel/z.inc\n.endl tt\n.library x\n')
    assert include_targets(text) == ["/a b/x.cir", "/y.inc", "/m.lib", "rel/z.inc"]


def moved_project(folder: Path) -> Path:
    """The demo with its model sections behind relative includes, and an absolute one
    inside an included file: models/models.lib -> cards/<section>.inc -> extra.inc."""
    cards = folder / "models" / "cards"
    cards.mkdir(parents=True)
    (cards / "extra.inc").write_text("* bundled only if followed\n.param bundled_extra=1\n")
    lines = (DEMO / "models.lib").read_text().splitlines()
    library, section, body = [], None, []
    for line in lines:
        words = line.lower().split()
        if words[:1] == [".lib"] and len(words) == 2:
            section, body = words[1], []
        elif words[:1] == [".endl"] and section:
            (cards / f"{section}.inc").write_text(
                f'.include "{cards / "extra.inc"}"\n' + "\n".join(body) + "\n")
            library += [f".lib {section}", f'.include "cards/{section}.inc"', f".endl {section}"]
            section = None
        elif section:
            body.append(line)
    (folder / "models" / "models.lib").write_text("\n".join(library) + "\n")
    shutil.copy(DEMO / "two_stage.cir", folder / "two_stage.cir")
    text = (DEMO / "job.toml").read_text().replace('models = "models.lib"',
                                                   'models = "models/models.lib"')
    (folder / "job.toml").write_text(text)
    return folder / "job.toml"


def test_bundle_runs_where_the_files_are_gone(tmp_path):
    job = load_job(moved_project(tmp_path / "project"))
    amplifier = prepare_amplifier(job)
    request = build_testbench(amplifier, job.corners[1], {}).request(60.0)
    with WorkerPool(1) as pool:
        [(_, reference)] = list(pool.run([(0, request)]))
    assert isinstance(reference, AnalysisOutput), reference
    bundled = replace(request, files=FileBundler().bundle(request.deck))
    root = tmp_path / "project"
    cards = root / "models" / "cards"
    sections = [line.split()[1].lower() for line in (DEMO / "models.lib").read_text()
                .splitlines() if line.lower().split()[:1] == [".lib"] and len(line.split()) == 2]
    assert [p for p, _ in bundled.files] == [  # ngspice reads the includes of every section
        str(root / "models" / "models.lib"), *(str(cards / f"{s}.inc") for s in sections),
        str(cards / "extra.inc")]
    (tmp_path / "project").rename(tmp_path / "moved")
    try:
        with WorkerPool(1) as pool:
            [(_, missing)] = list(pool.run([(0, request)]))
        assert isinstance(missing, SimulatorError) and "could not find" in missing.problem.lower()
        status, output = run_analysis(bundled)
        # a file missing on the coordinator is missing on the worker, named by its path
        gone = str(tmp_path / "project" / "models" / "models.lib")
        bundled_gone = replace(request, files=FileBundler().bundle(request.deck))
        assert bundled_gone.files == ()
        gone_status, problem = run_analysis(bundled_gone)
    finally:
        cluster_module._drop_local_pool()
    assert status == "ok", output
    assert len(output.reads) == len(reference.reads)
    for got, want in zip(output.reads, reference.reads):
        assert got.keys() == want.keys()
        for name in want:
            np.testing.assert_array_equal(got[name], want[name])
    assert gone_status == "error" and problem.problem.endswith(gone), problem
    assert problem.kind == "parse"  # ngspice could not read the missing file
