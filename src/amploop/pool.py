"""Worker processes that run analyses, one ngspice session each.

ngspice keeps global state, is not thread-safe, and some of its errors end the process,
so every analysis runs in a worker process and the coordinator only exchanges requests
and results with it over a pipe. A worker that dies (a crash inside ngspice, a kill) is
replaced and its analysis retried a bounded number of times; one that runs past the
analysis's time limit is killed and replaced, and that analysis reports a time-out.
Results come back as they finish, so callers can record them at once.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import signal
import time
from collections import deque
from collections.abc import Hashable, Iterable, Iterator
from dataclasses import dataclass
from multiprocessing.connection import wait

from .errors import SimulatorError
from .simulator import AnalysisOutput, AnalysisRequest

__all__ = ["WorkerPool", "default_workers"]


def default_workers() -> int:
    """The number of CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def _worker_main(conn) -> None:
    """Body of a worker process: run requests until told to stop or ngspice breaks."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the coordinator's business
    from .simulator import NgspiceSession

    try:
        session = NgspiceSession()
    except Exception as exc:  # noqa: BLE001 - reported to the coordinator, which decides
        conn.send(("fatal", f"cannot start ngspice: {exc}"))
        return
    conn.send(("ready", os.getpid()))
    while True:
        try:
            message = conn.recv()
        except EOFError:
            return
        if message is None:
            return
        task_id, request = message
        try:
            reply = (task_id, "ok", session.run(request))
        except SimulatorError as exc:
            reply = (task_id, "error", exc.problem)
        except Exception as exc:  # noqa: BLE001 - an unexpected failure of one analysis
            reply = (task_id, "error", f"internal error in the worker: {exc!r}")
        conn.send(reply + (session.broken,))
        if session.broken:
            conn.close()
            os._exit(0)  # ngspice cannot recover in this process; the pool starts another


@dataclass
class _Worker:
    process: mp.process.BaseProcess
    conn: object
    task: tuple | None = None  # (task_id, key, request, attempt)
    started: float = 0.0
    ready: bool = False


class WorkerPool:
    """A fixed number of worker processes, each holding one ngspice session.

    Parameters
    ----------
    workers
        How many processes (default: the CPU count).
    retries
        How many times an analysis is tried again after its worker died under it.

    Use as a context manager; :meth:`run` may be called many times on the same workers.
    """

    def __init__(self, workers: int | None = None, *, retries: int = 2) -> None:
        self.size = workers or default_workers()
        self.retries = retries
        self._context = mp.get_context("forkserver")
        self._context.set_forkserver_preload(["amploop.simulator", "numpy"])
        self._workers: list[_Worker] = []
        self._next_id = 0
        self.started_workers = 0
        self._failed_starts = 0

    def __enter__(self) -> WorkerPool:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _spawn(self) -> _Worker:
        parent, child = self._context.Pipe()
        process = self._context.Process(target=_worker_main, args=(child,), daemon=True)
        process.start()
        child.close()
        self.started_workers += 1
        return _Worker(process=process, conn=parent)

    def _retire(self, worker: _Worker, *, kill: bool) -> None:
        if kill and worker.process.is_alive():
            worker.process.kill()
        worker.process.join(timeout=5)
        try:
            worker.conn.close()
        except OSError:
            pass
        self._workers.remove(worker)

    def close(self) -> None:
        """Stop every worker."""
        for worker in list(self._workers):
            try:
                worker.conn.send(None)
            except (OSError, BrokenPipeError):
                pass
        deadline = time.monotonic() + 2
        for worker in list(self._workers):
            worker.process.join(timeout=max(0.0, deadline - time.monotonic()))
            self._retire(worker, kill=True)

    def run(
        self, requests: Iterable[tuple[Hashable, AnalysisRequest]]
    ) -> Iterator[tuple[Hashable, AnalysisOutput | SimulatorError]]:
        """Run every request; yield ``(key, output or SimulatorError)`` as each finishes."""
        pending: deque = deque((key, request, 0) for key, request in requests)
        while pending or any(w.task for w in self._workers):
            while len(self._workers) < min(self.size, len(pending) + self._busy()):
                self._workers.append(self._spawn())
            for worker in self._workers:
                if worker.ready and worker.task is None and pending:
                    key, request, attempt = pending.popleft()
                    self._next_id += 1
                    worker.task = (self._next_id, key, request, attempt)
                    worker.started = time.monotonic()
                    try:
                        worker.conn.send((self._next_id, request))
                    except OSError:  # it died between two looks; the sentinel will tell
                        pass
            yield from self._collect(pending)

    def _busy(self) -> int:
        return sum(1 for w in self._workers if w.task is not None)

    def _collect(self, pending: deque) -> Iterator[tuple[Hashable, object]]:
        now = time.monotonic()
        timeouts = [w.started + w.task[2].time_limit_s - now for w in self._workers if w.task]
        timeout = max(0.0, min(timeouts)) if timeouts else None
        waitables = {}
        for worker in self._workers:
            waitables[worker.conn] = worker
            waitables[worker.process.sentinel] = worker
        ready = wait(list(waitables), timeout=timeout)
        handled: set[int] = set()
        for item in ready:
            worker = waitables[item]
            if id(worker) in handled or worker not in self._workers:
                continue
            handled.add(id(worker))
            message = None
            if worker.conn.poll():
                try:
                    message = worker.conn.recv()
                except (EOFError, OSError):
                    message = None
            if message is not None and message[0] == "ready":
                worker.ready = True
                continue
            if message is not None and message[0] == "fatal":
                self._retire(worker, kill=True)
                raise SimulatorError(message[1])
            if message is not None and worker.task and message[0] == worker.task[0]:
                _, key, request, _ = worker.task
                worker.task = None
                _, status, payload, exiting = message
                if exiting:  # its ngspice cannot go on; it ends itself
                    self._retire(worker, kill=False)
                if status == "ok":
                    yield key, payload
                else:
                    yield key, SimulatorError(payload, place=request.label)
                continue
            if not worker.process.is_alive():
                code = worker.process.exitcode
                task = worker.task
                if not worker.ready:
                    self._failed_starts += 1
                    if self._failed_starts >= 3:
                        self._retire(worker, kill=True)
                        raise SimulatorError(
                            f"ngspice worker processes keep dying at start (exit code {code})",
                            hint="check that ngspice's shared library is installed; a script "
                            "that calls amploop needs the `if __name__ == \"__main__\":` guard",
                        )
                self._retire(worker, kill=True)
                if task is not None:
                    _, key, request, attempt = task
                    if attempt < self.retries:
                        pending.appendleft((key, request, attempt + 1))
                    else:
                        how = f"signal {-code}" if code is not None and code < 0 else f"code {code}"
                        yield key, SimulatorError(
                            f"ngspice crashed: its worker process ended with {how} "
                            f"({attempt + 1} attempts)", place=request.label)
        # time limits
        now = time.monotonic()
        for worker in list(self._workers):
            if worker.task and now - worker.started > worker.task[2].time_limit_s:
                _, key, request, _ = worker.task
                self._retire(worker, kill=True)
                yield key, SimulatorError(
                    f"time-out: the analysis ran longer than {request.time_limit_s:g} s "
                    "([analysis].time_limit)", place=request.label)
