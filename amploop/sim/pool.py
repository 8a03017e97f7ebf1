"""Worker processes that run analyses, one ngspice session each.

ngspice keeps global state, is not thread-safe, and some of its errors end the process,
so every analysis runs in a worker process and the coordinator only exchanges requests
and results with it over a pipe. A worker that dies (a crash inside ngspice, a kill) is
replaced and its analysis retried a bounded number of times; one that runs past the
analysis's time limit is killed and replaced, and that analysis reports a time-out.
Answers are read without blocking (:mod:`amploop.sim.frames`): a worker whose answer has begun
to arrive but is still incomplete at the time limit (stopped half-way through sending it)
is killed, replaced and its analysis retried, as a crashed one is. Results come back as
they finish, so callers can record them at once.
"""

from __future__ import annotations

import multiprocessing as mp
import os
import signal
import time
from collections import deque
from collections.abc import Hashable, Iterable, Iterator
from dataclasses import dataclass, field, replace
from multiprocessing.connection import wait
from typing import Self

from amploop.bench.requests import AnalysisOutput, AnalysisRequest
from amploop.errors import SimulatorError
from amploop.sim.frames import FrameReader, Sender, send_frame

__all__ = ["WorkerPool", "default_workers", "start_fork_server"]

#: What the fork server imports once, so that each worker forked from it starts in
#: milliseconds (PySpice's import alone takes about 0.13 s).
_PRELOAD = ["amploop.sim.ngspice", "amploop.corners.measure", "numpy", "PySpice.Spice.NgSpice.Shared"]


#: Seconds a new worker may take to start ngspice and report ready (tens of milliseconds
#: as a rule; seconds on a loaded machine).
START_LIMIT_S = 60.0


def _context():
    context = mp.get_context("forkserver")
    context.set_forkserver_preload(_PRELOAD)
    return context


def start_fork_server() -> None:
    """Start the fork server now, so that its imports run while this process reads the
    job and the netlist (the command line calls this first). Idempotent."""
    from multiprocessing import forkserver

    _context()
    forkserver.ensure_running()


def default_workers() -> int:
    """The number of CPUs this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # not on Linux
        return max(1, os.cpu_count() or 1)


def _worker_main(conn) -> None:
    """Body of a worker process: run requests until told to stop or ngspice breaks."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the coordinator's business
    import tempfile

    from amploop.sim.ngspice import NgspiceSession

    # some model cards make ngspice write files into the working directory (BSIM4's
    # parameter check writes bsim4v5.out): keep them out of the user's folder
    scratch = tempfile.TemporaryDirectory(prefix="amploop-worker-")
    os.chdir(scratch.name)

    try:
        session = NgspiceSession()
    except Exception as exc:  # noqa: BLE001 - reported to the coordinator, which decides
        send_frame(conn, ("fatal", f"cannot start ngspice: {exc}"))
        return
    send_frame(conn, ("ready", os.getpid()))
    while True:
        try:
            message = conn.recv()
        except EOFError:
            return
        if message is None:
            return
        task_id, request = message
        try:
            reply = (task_id, "ok", _with_after(request, session.run(request)))
        except SimulatorError as exc:  # pickled whole: its kind travels with it
            reply = (task_id, "error", exc)
        except Exception as exc:  # noqa: BLE001 - an unexpected failure of one analysis
            reply = (task_id, "error", SimulatorError(f"internal error in the worker: {exc!r}"))
        send_frame(conn, reply + (session.broken,))
        if session.broken:
            conn.close()
            os._exit(0)  # ngspice cannot recover in this process; the pool starts another


def _with_after(request: AnalysisRequest, output: AnalysisOutput) -> AnalysisOutput:
    """Run the request's ``after`` work on a finished analysis, here in the worker."""
    if request.after is None:
        return output
    try:
        return replace(output, after=request.after(output))
    except Exception:  # noqa: BLE001 - the analysis stands; the caller redoes it
        return output


@dataclass
class _Task:
    task_id: int
    key: Hashable
    request: AnalysisRequest
    attempt: int


@dataclass
class _Worker:
    process: mp.process.BaseProcess
    conn: object
    reader: FrameReader
    sender: Sender
    queue: deque = field(default_factory=deque)  # tasks sent, in the order it runs them
    head_since: float = 0.0  # when the first task in the queue became the running one
    ready: bool = False
    started: float = field(default_factory=time.monotonic)  # when it was started


class WorkerPool:
    """A fixed number of worker processes, each holding one ngspice session.

    Parameters
    ----------
    workers
        How many processes (default: the CPU count).
    retries
        How many times an analysis is tried again after its worker died under it.
    depth
        Analyses queued per worker, so that a worker starts the next one while the
        coordinator is still recording the last.
    start_limit_s
        Seconds a new worker may take to start its ngspice and say so; one that takes
        longer (stopped, or hanging in ngspice's start) is killed and counts as a failed
        start (three in a row end the run).

    Use as a context manager; :meth:`run` may be called many times on the same workers.
    """

    def __init__(self, workers: int | None = None, *, retries: int = 2, depth: int = 2,
                 start_limit_s: float = START_LIMIT_S) -> None:
        self.size = workers or default_workers()
        self.start_limit_s = start_limit_s
        #: workers see the coordinator's files, and have every core to themselves: they
        #: then do a request's ``after`` work (see :class:`AnalysisRequest`)
        self.shares_files = True
        self.retries = retries
        self.depth = depth
        self._context = _context()
        self._workers: list[_Worker] = []
        self._next_id = 0
        self.started_workers = 0
        self._failed_starts = 0

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _spawn(self) -> _Worker:
        parent, child = self._context.Pipe()
        process = self._context.Process(target=_worker_main, args=(child,), daemon=True)
        process.start()
        child.close()
        self.started_workers += 1
        return _Worker(process=process, conn=parent, reader=FrameReader(parent),
                       sender=Sender(parent))

    def _retire(self, worker: _Worker, *, kill: bool) -> None:
        if kill and worker.process.is_alive():
            worker.process.kill()
        worker.process.join(timeout=5)
        worker.sender.close()  # its thread closes the pipe once done with it
        if worker in self._workers:
            self._workers.remove(worker)

    def close(self) -> None:
        """Stop every worker."""
        for worker in list(self._workers):
            worker.sender.send(None)
        deadline = time.monotonic() + 2
        for worker in list(self._workers):
            worker.process.join(timeout=max(0.0, deadline - time.monotonic()))
            self._retire(worker, kill=True)

    def _in_flight(self) -> int:
        return sum(len(w.queue) for w in self._workers)

    def _feed(self, pending: deque) -> None:
        """Hand tasks from ``pending`` to the ready workers: first one to each worker that
        has none, then one more queued behind the running one of each busy worker (so it
        starts the next while the coordinator records the last), but only while at least
        as many tasks wait as there are workers. The last tasks thus go to whichever
        worker is free first, and no worker idles at the end while another still has an
        analysis queued (with analyses of tens of milliseconds, that tail costs more than
        the round trip the queue saves)."""
        for worker in self._workers:
            if worker.ready and pending and not worker.queue:
                self._send(worker, pending)
        for worker in self._workers:
            while (worker.ready and len(pending) >= self.size
                   and 0 < len(worker.queue) < self.depth):
                self._send(worker, pending)

    def _send(self, worker: _Worker, pending: deque) -> None:
        """Send the first task of ``pending`` to ``worker`` (its sender thread writes it;
        should the worker have died meanwhile, its sentinel tells and the task is put back
        in line)."""
        key, request, attempt = pending.popleft()
        self._next_id += 1
        task = _Task(self._next_id, key, request, attempt)
        worker.sender.send((task.task_id, request))
        if not worker.queue:
            worker.head_since = time.monotonic()
        worker.queue.append(task)

    def run(
        self, requests: Iterable[tuple[Hashable, AnalysisRequest]]
    ) -> Iterator[tuple[Hashable, AnalysisOutput | SimulatorError]]:
        """Run every request; yield ``(key, output or SimulatorError)`` as each finishes.

        Parameters
        ----------
        requests
            ``(key, request)`` pairs; the key comes back with the request's result.
        """
        pending: deque = deque((key, request, 0) for key, request in requests)
        while pending or self._in_flight():
            wanted = min(self.size, len(pending) + self._in_flight())
            while len(self._workers) < wanted:
                self._workers.append(self._spawn())
            self._feed(pending)
            yield from self._collect(pending)

    def _requeue(self, worker: _Worker, pending: deque, *, crashed: bool = True,
                 stalled: bool = False) -> Iterator[tuple[Hashable, object]]:
        """A worker is gone (or ``stalled`` half-way through an answer: it is killed):
        retry its running task (bounded) if it crashed or stalled under it, and put the
        tasks that never started back in line."""
        if stalled:
            worker.process.kill()  # SIGKILL ends a stopped process too
        worker.process.join(timeout=2)  # reap it, so the exit code is known
        code = worker.process.exitcode
        tasks = list(worker.queue)
        worker.queue.clear()
        self._retire(worker, kill=True)
        crashed = crashed or stalled
        for task in reversed(tasks[1:] if crashed else tasks):
            pending.appendleft((task.key, task.request, task.attempt))
        if tasks and crashed:
            head = tasks[0]
            if head.attempt < self.retries:
                pending.appendleft((head.key, head.request, head.attempt + 1))
            elif stalled:
                yield head.key, SimulatorError(
                    "its worker process stopped half-way through sending the answer, "
                    f"past the time limit of {head.request.time_limit_s:g} s "
                    f"({head.attempt + 1} attempts)", place=head.request.label, kind="crash")
            else:
                how = f"signal {-code}" if code is not None and code < 0 else f"code {code}"
                yield head.key, SimulatorError(
                    f"ngspice crashed: its worker process ended with {how} "
                    f"({head.attempt + 1} attempts)", place=head.request.label, kind="crash")

    def _failed_start(self, worker: _Worker, how: str) -> None:
        """Count a worker that never became ready; the third in a row ends the run."""
        self._failed_starts += 1
        if self._failed_starts >= 3:
            self._retire(worker, kill=True)
            raise SimulatorError(
                f"ngspice worker processes {how}",
                hint="check that ngspice's shared library is installed; a script "
                "that calls amploop needs the `if __name__ == \"__main__\":` guard",
                kind="crash",
            )

    def _collect(self, pending: deque) -> Iterator[tuple[Hashable, object]]:
        now = time.monotonic()
        limits = [w.head_since + w.queue[0].request.time_limit_s - now
                  for w in self._workers if w.queue]
        limits += [w.started + self.start_limit_s - now for w in self._workers if not w.ready]
        timeout = max(0.0, min(limits)) if limits else None
        waitables = {}
        for worker in self._workers:
            waitables[worker.conn] = worker
            waitables[worker.process.sentinel] = worker
        ready = wait(list(waitables), timeout=timeout)
        handled: set[int] = set()
        finished = []
        for item in ready:
            worker = waitables[item]
            if id(worker) in handled or worker not in self._workers:
                continue
            handled.add(id(worker))
            exited = False
            for message in worker.reader.read():
                if message[0] == "ready":
                    worker.ready = True
                    self._failed_starts = 0
                elif message[0] == "fatal":
                    self._retire(worker, kill=True)
                    raise SimulatorError(message[1], kind="crash")
                elif worker.queue and message[0] == worker.queue[0].task_id:
                    task = worker.queue.popleft()
                    worker.head_since = time.monotonic()
                    _, status, payload, exiting = message
                    finished.append((task, status, payload))
                    if exiting:  # its ngspice cannot go on; it ends itself
                        exited = True
                        break
            if exited:
                yield from self._requeue(worker, pending, crashed=False)
                continue
            if not worker.reader.closed and worker.process.is_alive():
                self._feed(pending)  # keep the worker busy before recording results
                continue
            if not worker.ready:
                self._failed_start(worker, f"keep dying at start (exit code "
                                           f"{worker.process.exitcode})")
            yield from self._requeue(worker, pending)
        for task, status, payload in finished:
            if status == "ok":
                yield task.key, payload
            else:
                yield task.key, SimulatorError(payload.problem, place=task.request.label,
                                               kind=payload.kind)
        # time limits: the start of each new worker, the running (head) task of each other
        now = time.monotonic()
        for worker in list(self._workers):
            if not worker.ready and now - worker.started > self.start_limit_s:
                self._retire(worker, kill=True)
                self._failed_start(worker, f"do not start within {self.start_limit_s:g} s")
        for worker in list(self._workers):
            if worker.queue and now - worker.head_since > worker.queue[0].request.time_limit_s:
                if worker.reader.partial:  # its answer stopped half-way: as a crash
                    yield from self._requeue(worker, pending, stalled=True)
                    continue
                head = worker.queue.popleft()
                for task in reversed(worker.queue):
                    pending.appendleft((task.key, task.request, task.attempt))
                worker.queue.clear()
                self._retire(worker, kill=True)
                yield head.key, SimulatorError(
                    f"time-out: the analysis ran longer than {head.request.time_limit_s:g} s "
                    "([analysis].time_limit)", place=head.request.label, kind="timeout")
