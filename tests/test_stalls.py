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
from dataclasses import replace
from pathlib import Path

from stopping import StopHalfwayThroughTheAnswer

from amploop.pool import WorkerPool
from amploop.simulator import AnalysisOutput, AnalysisRequest, Step

FAST = AnalysisRequest("fast", "* fast\nV1 a 0 dc 1\nR1 a 0 1k\n.end\n",
                       (Step("op", ("i(v1)",)),), time_limit_s=2.0)


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

        started = time.monotonic()
        runner = threading.Thread(target=run, daemon=True)
        runner.start()
        runner.join(timeout=30)
        hung = runner.is_alive()
        seconds = time.monotonic() - started
        kill_if_left(marker)  # lets a coordinator stuck in a read go on
        runner.join(timeout=30)
        started_workers = pool.started_workers
    assert marker.exists()  # the first try did stop itself
    assert not hung, "the coordinator hung on a half-sent answer"
    assert seconds < FAST.time_limit_s + 10
    output = results["stalls"]
    assert isinstance(output, AnalysisOutput), output
    assert output.after == bytes(stall.size)  # the retry's answer, whole
    assert started_workers == 2  # the stopped worker was replaced
