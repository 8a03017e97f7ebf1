"""Nothing hangs past its time limit: workers stopped with SIGSTOP, a scheduler lost.

Each fault is made for real: a local worker process stopped half-way through sending its
answer (tests/stopping.py stops it from inside, once it is blocked writing the answer),
a Dask worker process stopped while it holds an analysis, a Dask scheduler shut down in
the middle of a run. The promise checked is that of the README's fault table: the run
ends within a bound set by the analysis's time limit, the stalled analysis is retried
elsewhere and gives the same answer as an undisturbed one.
"""

from __future__ import annotations

import os
import signal
import threading
import time
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path

import numpy as np
from stopping import StopHalfwayThroughTheAnswer

from amploop.bench.requests import AnalysisOutput, AnalysisRequest, Step
from amploop.sim.pool import WorkerPool

FAST = AnalysisRequest("fast", "* fast\nV1 a 0 dc 1\nR1 a 0 1k\n.end\n",
                       (Step("op", ("i(v1)",)),), time_limit_s=2.0)


def run_watched(work, timeout_s: float, release) -> tuple[bool, float]:
    """Run ``work()`` in a thread for at most ``timeout_s``; then call ``release()`` (which
    lets a stuck ``work`` end) and wait for it. Whether it hung, and its seconds."""
    started = time.monotonic()
    runner = threading.Thread(target=work, daemon=True)
    runner.start()
    runner.join(timeout=timeout_s)
    hung = runner.is_alive()
    seconds = time.monotonic() - started
    release()
    runner.join(timeout=timeout_s)
    return hung, seconds


def resume(pids: list[int]) -> None:
    """SIGCONT each of ``pids`` that still exists."""
    for pid in pids:
        try:
            os.kill(pid, signal.SIGCONT)
        except ProcessLookupError:
            pass


def kill_if_left(marker: Path) -> None:
    """SIGKILL the worker that stopped itself (named in ``marker``), if it still exists."""
    try:
        os.kill(int(marker.read_text()), signal.SIGKILL)
    except (FileNotFoundError, ValueError, ProcessLookupError):
        pass


def test_a_worker_stopped_half_way_through_its_answer_is_replaced_and_retried(tmp_path):
    marker = tmp_path / "stopped"
    stall = StopHalfwayThroughTheAnswer(str(marker))
    request = replace(FAST, after=stall)
    results: dict = {}
    with WorkerPool(1) as pool:
        def run() -> None:
            results.update(pool.run([("stalls", request)]))

        # killing the stopped worker lets a coordinator stuck in a read go on
        hung, seconds = run_watched(run, 30, lambda: kill_if_left(marker))
        started_workers = pool.started_workers
    assert marker.exists()  # the first try did stop itself
    assert not hung, "the coordinator hung on a half-sent answer"
    assert seconds < FAST.time_limit_s + 10
    output = results["stalls"]
    assert isinstance(output, AnalysisOutput), output
    assert output.after == bytes(stall.size)  # the retry's answer, whole
    assert started_workers == 2  # the stopped worker was replaced



def test_a_large_deck_queued_behind_a_large_answer_does_not_deadlock(tmp_path):
    """A 4 MB deck (a large netlist, inlined) queued for a worker that is sending a 4 MB
    answer (a long sweep): neither fits in the pipe. The coordinator's sends go through a
    thread, so it reads the answer while the deck waits; both analyses complete."""
    marker = tmp_path / "never-stops"
    marker.touch()  # the stopper then only makes the large answer
    big_answer = replace(FAST, label="big-answer",
                         after=StopHalfwayThroughTheAnswer(str(marker), size=4 << 20))
    padding = "* a line of a large netlist, padding the deck\n" * 100_000
    big_deck = replace(FAST, label="big-deck", deck="* big\n" + padding + FAST.deck)
    assert len(big_deck.deck) > 4 << 20
    results: dict = {}
    with WorkerPool(1) as pool:
        def run() -> None:
            results.update(pool.run([("answer", big_answer), ("deck", big_deck)]))

        hung, seconds = run_watched(run, 30, lambda: [w.process.kill() for w in pool._workers])
    assert not hung, "the coordinator and its worker waited on each other"
    assert seconds < 15
    assert isinstance(results["answer"], AnalysisOutput) and len(results["answer"].after) == 4 << 20
    assert isinstance(results["deck"], AnalysisOutput), results["deck"]
    assert results["deck"].reads[0]["i(v1)"] == results["answer"].reads[0]["i(v1)"]



class StopAtStart(threading.Thread):
    """SIGSTOPs each of the first ``times`` workers the pool starts, before it is ready."""

    def __init__(self, pool: WorkerPool, times: int) -> None:
        super().__init__(daemon=True)
        self.pool, self.times, self.stopped = pool, times, []
        self.done = threading.Event()

    def run(self) -> None:
        while not self.done.is_set() and len(self.stopped) < self.times:
            for worker in list(self.pool._workers):
                pid = worker.process.pid
                if not worker.ready and pid not in self.stopped:
                    os.kill(pid, signal.SIGSTOP)
                    self.stopped.append(pid)
            time.sleep(0.0005)


def test_a_worker_stopped_before_it_is_ready_is_replaced(tmp_path):
    with WorkerPool(1, start_limit_s=2.0) as pool:
        stopper = StopAtStart(pool, times=1)
        stopper.start()
        results: dict = {}
        hung, seconds = run_watched(lambda: results.update(pool.run([("fast", FAST)])), 30,
                                    lambda: resume(stopper.stopped))
        stopper.done.set()
        started_workers = pool.started_workers
    assert len(stopper.stopped) == 1
    assert not hung, "the pool waited for ever for a stopped worker to start"
    assert seconds < 15
    assert isinstance(results["fast"], AnalysisOutput), results["fast"]
    assert started_workers == 2


def test_workers_that_never_start_end_the_run_in_one_line(tmp_path):
    import pytest

    from amploop.errors import SimulatorError

    with WorkerPool(1, start_limit_s=1.0) as pool:
        stopper = StopAtStart(pool, times=3)
        stopper.start()
        with pytest.raises(SimulatorError, match="do not start within 1 s"):
            list(pool.run([("fast", FAST)]))
        stopper.done.set()
    assert len(stopper.stopped) == 3


# -- on a Dask cluster ---------------------------------------------------------------------

# an RC driven by a sine: a `tran` of about a quarter of a second
SHORT = AnalysisRequest("short", "* short\nV1 a 0 sin(0 1 1meg)\nR1 a b 1k\nC1 b 0 1n\n.end\n",
                        (Step("tran 1n 20u 19u", ("v(b)",)),), time_limit_s=2.0)


def local_reference() -> AnalysisOutput:
    """SHORT run once on an undisturbed local pool: the arrays every cluster run must give."""
    with WorkerPool(1) as local:
        [(_, reference)] = list(local.run([(0, SHORT)]))
    return reference


@contextmanager
def warm_cluster_pool(tmp_path):
    """A ClusterPool (grace 2 s) on a local two-worker cluster whose workers have each run
    SHORT once (their ngspice started); yields ``(pool, worker address -> pid)``."""
    from test_cluster import local_cluster

    from amploop.sim.cluster import ClusterPool

    with local_cluster(tmp_path) as running, \
            ClusterPool(running.scheduler_address, grace_s=2.0) as pool:
        list(pool.run([(n, SHORT) for n in range(4)]))
        yield pool, pool.client.run(os.getpid)


def test_a_stopped_dask_worker_costs_a_deadline_and_its_analyses_run_elsewhere(tmp_path):
    """SIGSTOP a Dask worker process that holds an analysis: within twice the time limit
    plus the grace, its analyses are handed to the other worker; every analysis gives the
    arrays of an undisturbed local run."""
    import pytest

    pytest.importorskip("distributed")
    reference = local_reference()
    assert isinstance(reference, AnalysisOutput), reference
    requests = [(n, replace(SHORT, label=f"short-{n}")) for n in range(8)]
    stopped: list[int] = []
    results: dict = {}
    with warm_cluster_pool(tmp_path) as (pool, pids):

        def run() -> None:
            for key, output in pool.run(requests):
                results[key] = output
                if not stopped:
                    busy = [a for a, keys in pool.client.processing().items() if keys]
                    os.kill(pids[busy[0]], signal.SIGSTOP)
                    stopped.append(pids[busy[0]])

        # resuming the stopped worker lets the cluster (and a stuck run) end
        hung, seconds = run_watched(run, 60, lambda: resume(stopped))
    assert stopped
    assert not hung, "the run hung on a stopped Dask worker"
    assert seconds < 30, seconds  # the deadline: 2 x 2 s + 2 s, plus the analyses
    assert sorted(results) == list(range(8))
    for output in results.values():
        assert isinstance(output, AnalysisOutput), output
        np.testing.assert_array_equal(output.reads[0]["v(b)"], reference.reads[0]["v(b)"])


def test_a_worker_stopped_before_its_answer_is_fetched_costs_a_deadline(tmp_path):
    """An analysis finishes on a Dask worker, which is stopped before the coordinator
    fetches the arrays (they stay on that worker until then): the fetch misses its
    deadline, the worker is left out, the analysis runs again elsewhere and gives the
    arrays of an undisturbed local run. This is the order of events that once hung the
    run (the fetch had no deadline)."""
    import pytest

    pytest.importorskip("distributed")
    reference = local_reference()
    requests = [(n, replace(SHORT, label=f"short-{n}")) for n in range(4)]
    stopped: list[int] = []
    results: dict = {}
    with warm_cluster_pool(tmp_path) as (pool, pids):
        fetch = pool._outcome

        def stop_its_holder_then_fetch(future, request, timeout_s):
            if not stopped:
                [holder] = pool.client.who_has([future])[future.key]
                os.kill(pids[holder], signal.SIGSTOP)
                stopped.append(pids[holder])
            return fetch(future, request, timeout_s)

        pool._outcome = stop_its_holder_then_fetch

        def run() -> None:
            for key, output in pool.run(requests):
                results[key] = output

        hung, seconds = run_watched(run, 60, lambda: resume(stopped))
    assert stopped
    assert not hung, "the run hung fetching an answer from a stopped Dask worker"
    assert seconds < 30, seconds
    assert sorted(results) == list(range(4))
    for output in results.values():
        assert isinstance(output, AnalysisOutput), output
        np.testing.assert_array_equal(output.reads[0]["v(b)"], reference.reads[0]["v(b)"])


# a LocalCluster on 127.0.0.1 in a process of its own (so that it can be killed): prints
# the scheduler's address, then waits
CLUSTER_PROCESS = """
import sys, time
import distributed
if __name__ == "__main__":
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  host="127.0.0.1", dashboard_address=None,
                                  scheduler_kwargs={"dashboard_address": ":0"},
                                  local_directory=sys.argv[1]) as cluster:
        print(cluster.scheduler_address, flush=True)
        while True:
            time.sleep(1)
"""


def test_a_lost_scheduler_ends_the_run_in_one_line(tmp_path):
    """SIGKILL the scheduler (and its workers) while `measure --cluster` has analyses on
    it: the command ends within seconds, with one line on stderr and no traceback."""
    import subprocess
    import sys

    import pytest

    pytest.importorskip("distributed")
    from test_faults import demo_copy, slow

    job = demo_copy(tmp_path / "job", job_edit=slow)
    (tmp_path / "dask").mkdir()
    cluster = subprocess.Popen([sys.executable, "-c", CLUSTER_PROCESS, str(tmp_path / "dask")],
                               stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True,
                               start_new_session=True)
    try:
        address = cluster.stdout.readline().strip()
        assert address.startswith("tcp://127.0.0.1:"), address
        out = tmp_path / "out"
        run = subprocess.Popen([sys.executable, "-m", "amploop.cli", "measure", str(job),
                                "--out", str(out), "--no-report", "--cluster", address],
                               stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
        waited = time.monotonic()
        while not (out / "journal.sqlite").exists() and time.monotonic() - waited < 60:
            time.sleep(0.1)
        time.sleep(1.0)  # analyses handed to the cluster (each takes seconds)
        assert run.poll() is None, run.communicate()
    finally:
        os.killpg(cluster.pid, signal.SIGKILL)  # the scheduler and its workers
        cluster.wait()
    lost = time.monotonic()
    try:
        _, err = run.communicate(timeout=60)
    finally:
        run.kill()
    assert time.monotonic() - lost < 30
    assert run.returncode != 0
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    assert "lost the connection to the Dask scheduler" in lines[0] and address in lines[0]
