"""Analyses on the workers of a Dask distributed cluster (``--cluster ADDRESS``).

:class:`ClusterPool` has the interface of :class:`amploop.sim.pool.WorkerPool` (a context
manager with ``close()``, ``size`` and ``run(requests)`` yielding results as they finish),
so the runner, its journal and everything above it do not know where the analyses run.

What goes over the network: each analysis travels as text, its generated deck plus the
contents of every file the deck includes (recursively: an included file may include
others, relative to its own folder), because workers need not share the coordinator's
file system. The result arrays come back. The coordinator alone writes the journal; the
journal key is computed from the request before this pool sees it, so the bundled files
never change a key.

On a worker, :func:`run_analysis` (a module-level function, so workers import it from
their own amploop) writes the bundled files into a temporary folder under the same
absolute paths (``<tmp>/work/x/models.lib`` for ``/work/x/models.lib``), so relative
includes inside them still resolve; the folder is named by the files' content and kept
for the next analysis that bundles the same files. It points the deck's absolute paths
at the copies and runs the analysis through a local :class:`~amploop.sim.pool.WorkerPool` of one process kept
for the life of the Dask worker process. The Dask worker itself never loads ngspice: its
child does, which isolates crashes and enforces the analysis's time limit inside the task
(a running Dask task cannot be cancelled). The coordinator keeps a deadline of its own
for every analysis, so that a Dask worker that stops or is cut off costs a deadline, not
the run: its analyses are handed to the other workers (:mod:`amploop.sim.deadlines`). A Dask
worker that dies has its task re-run elsewhere by the scheduler; after ``distributed.scheduler.allowed-failures`` deaths the
task ends with ``KilledWorker``, reported here as that analysis's SimulatorError, and the
run goes on.

Workers should be processes with one thread each (``dask worker ADDRESS --nworkers N
--nthreads 1``); a worker with more threads still works (one local ngspice process per
thread) but gains nothing over more worker processes.
"""

from __future__ import annotations

import atexit
import logging
import multiprocessing as mp
import os
import threading
import uuid
from collections.abc import Hashable, Iterable, Iterator
from dataclasses import replace
from importlib.metadata import version
from typing import Self

from amploop.bench.requests import AnalysisOutput, AnalysisRequest
from amploop.errors import JobError, SimulatorError
from amploop.sim.bundles import BUNDLES, FileBundler, reroot
from amploop.sim.deadlines import run_with_deadlines

__all__ = ["ClusterPool", "run_analysis", "worker_check"]

#: Seconds to wait for the scheduler (and for its first worker) before giving up.
CONNECT_TIMEOUT_S = 10.0
#: Seconds an analysis may take beyond twice its time limit before it is handed over
#: again (the network, the files, the start of a worker's ngspice process).
GRACE_S = 10.0


def _distributed():
    """The ``distributed`` package, or a one-line SimulatorError saying how to get it."""
    try:
        import distributed
    except ImportError:
        raise SimulatorError(
            "--cluster needs the Python package 'distributed' (Dask), which is not installed",
            hint="pip install 'amploop[cluster]'") from None
    return distributed


# -- on the worker ----------------------------------------------------------------------


_local = threading.local()


def _local_pool():
    """This thread's one-process WorkerPool (created on first use, kept for the next)."""
    from amploop.sim.pool import WorkerPool

    pool = getattr(_local, "pool", None)
    if pool is None:
        process = mp.current_process()
        if process.daemon:
            # Dask's nanny starts its worker processes as daemons, and multiprocessing
            # refuses children to daemons. The flag only matters inside this process
            # (the nanny keeps its own); our ngspice child is a daemon itself and ends
            # when this process does or its pipe closes.
            process.daemon = False
        pool = WorkerPool(1)
        _local.pool = pool
        atexit.register(pool.close)
    return pool


def _drop_local_pool() -> None:
    pool = getattr(_local, "pool", None)
    _local.pool = None
    if pool is not None:
        pool.close()


def run_analysis(request: AnalysisRequest) -> tuple[str, object]:
    """The Dask task: one analysis on this worker, through a local ngspice process.

    Parameters
    ----------
    request
        The analysis, with the contents of the files its deck includes
        (:meth:`FileBundler.bundle`).

    Returns
    -------
    ("ok", AnalysisOutput) or ("error", SimulatorError)
        The SimulatorError (ngspice's failure, a crash after the local pool's retries, or
        a time-out enforced by the local pool) keeps its kind; the temporary folder is
        taken out of any path its problem names.
    """
    output: AnalysisOutput | SimulatorError | None = None
    root = ""
    try:
        with BUNDLES.folder(request) as root:
            local = replace(request, deck=reroot(request.deck, root), files=())
            try:
                for _, output in _local_pool().run([(0, local)]):
                    pass
            except SimulatorError:  # its ngspice processes cannot start: start afresh
                _drop_local_pool()
                raise
    except SimulatorError as exc:
        output = exc
    if output is None:
        return "error", SimulatorError("the worker's local pool gave no answer")
    if isinstance(output, SimulatorError):
        return "error", SimulatorError(output.problem.replace(root, "") if root else
                                       output.problem, kind=output.kind)
    return "ok", replace(output, messages=tuple(m.replace(root, "") for m in output.messages))


def worker_check() -> dict:
    """What a worker reports when the coordinator connects (run there by ``client.run``)."""
    import sys

    return {"amploop": version("amploop"), "python": sys.version.split()[0], "pid": os.getpid()}


# -- on the coordinator -----------------------------------------------------------------


def _check_address(address: str) -> None:
    """A JobError (a command-line mistake) when ``address`` is no scheduler address."""
    from distributed.comm import parse_address
    from distributed.comm.registry import get_backend

    try:
        scheme, location = parse_address(address)
        get_backend(scheme)
    except ValueError as exc:
        raise JobError(f"not a Dask scheduler address: {address!r} ({exc})",
                       place="--cluster", hint="e.g. tcp://scheduler-host:8786") from None
    if not location.strip():
        raise JobError(f"not a Dask scheduler address: {address!r}", place="--cluster",
                       hint="e.g. tcp://scheduler-host:8786")


class ClusterPool:
    """Runs analyses on an existing Dask distributed cluster.

    Parameters
    ----------
    address
        The scheduler, e.g. ``"tcp://scheduler-host:8786"``.
    timeout_s
        How long to wait for the scheduler, and for at least one worker.
    retries
        How many times an analysis that misses its deadline is handed over again.
    grace_s
        Seconds added to every deadline (:func:`amploop.sim.deadlines.deadline_s`).

    Raises
    ------
    SimulatorError
        When ``distributed`` is not installed, the scheduler cannot be reached, it has no
        worker, or a worker cannot import amploop (or has another version of it).

    Notes
    -----
    The ``distributed.client`` logger is set to show critical records only: when the
    scheduler is lost it would print its reconnection tracebacks, while the run ends with
    one line saying so.

    Use as a context manager; :meth:`run` may be called many times.
    """

    def __init__(self, address: str, *, timeout_s: float = CONNECT_TIMEOUT_S,
                 retries: int = 2, grace_s: float = GRACE_S) -> None:
        distributed = _distributed()
        # the client and its connection's batched sender log a lost scheduler with
        # tracebacks (the sender's "Batched Comm Closed", at INFO); the run reports it in
        # one line (deadlines.py), so only their critical records are shown
        for name in ("distributed.client", "distributed.batched"):
            logging.getLogger(name).setLevel(logging.CRITICAL)
        self.address = address
        self.retries = retries
        self.grace_s = grace_s
        self._bundler = FileBundler()
        self._token = uuid.uuid4().hex[:12]
        self._count = 0
        self.shares_files = False  # workers may be elsewhere: the coordinator writes files
        _check_address(address)
        try:
            self._client = distributed.Client(address, timeout=timeout_s,
                                              set_as_default=False)
        except Exception as exc:  # noqa: BLE001 - OSError, ValueError, ...: one line
            text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise SimulatorError(f"cannot reach the Dask scheduler at {address}: {text}",
                                 hint="is `dask scheduler` running there, and the port open?"
                                 ) from None
        try:
            self._check_workers(timeout_s)
        except BaseException:
            self._client.close()
            raise

    def _check_workers(self, timeout_s: float) -> None:
        try:
            self._client.wait_for_workers(1, timeout=timeout_s)
        except Exception:  # noqa: BLE001 - a TimeoutError of whichever flavour
            raise SimulatorError(f"the Dask scheduler at {self.address} has no workers "
                                 f"(waited {timeout_s:g} s)",
                                 hint="start some: dask worker ADDRESS --nthreads 1") from None
        reports = self._client.run(worker_check, on_error="return")
        for worker, report in sorted(reports.items()):
            if isinstance(report, BaseException) or not isinstance(report, dict):
                raise SimulatorError(f"Dask worker {worker} cannot run amploop: {report!r}",
                                     hint="install amploop (and ngspice) on every worker")
            if report.get("amploop") != version("amploop"):
                raise SimulatorError(
                    f"Dask worker {worker} has amploop {report.get('amploop')}, this machine "
                    f"{version('amploop')}", hint="install the same amploop on every worker")

    @property
    def client(self):
        """The ``distributed.Client`` connected to the scheduler."""
        return self._client

    @property
    def size(self) -> int:
        """Analyses the cluster runs at once (its workers' threads)."""
        return max(1, sum(self._client.nthreads().values()))

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Disconnect from the scheduler (the cluster keeps running)."""
        self._client.close()

    def run(
        self, requests: Iterable[tuple[Hashable, AnalysisRequest]]
    ) -> Iterator[tuple[Hashable, AnalysisOutput | SimulatorError]]:
        """Run every request on the cluster; yield ``(key, output or SimulatorError)`` as
        each finishes. Analyses still queued are cancelled if the caller stops early.

        Each analysis has a deadline here as well as its time limit inside the task; one
        that misses it is handed to the other workers (:mod:`amploop.sim.deadlines`).

        Parameters
        ----------
        requests
            ``(key, request)`` pairs; the key comes back with the request's result. Each
            request travels with the files its deck includes, without its ``after``.

        Raises
        ------
        SimulatorError
            When the connection to the scheduler is lost.
        """
        _distributed()

        def submit(request: AnalysisRequest, workers: list[str] | None):
            bundled = replace(request, files=self._bundler.bundle(request.deck), after=None)
            self._count += 1
            return self._client.submit(run_analysis, bundled, pure=False, workers=workers,
                                       key=f"amploop-analysis-{self._token}-{self._count}")

        yield from run_with_deadlines(self._client, requests, submit, self._outcome,
                                      slots=2 * self.size, retries=self.retries,
                                      grace_s=self.grace_s, address=self.address)

    @staticmethod
    def _outcome(future, request: AnalysisRequest,
                 timeout_s: float) -> AnalysisOutput | SimulatorError:
        """The finished ``future``'s output or SimulatorError, fetched within
        ``timeout_s`` seconds (``TimeoutError`` when its worker does not answer)."""
        from distributed import KilledWorker

        try:
            status, payload = future.result(timeout=timeout_s)
        except TimeoutError:
            raise  # kept, so that the caller can ask who holds it
        except KilledWorker as exc:
            allowed = getattr(exc, "allowed_failures", None)
            tries = ("repeatedly" if allowed is None else "once" if allowed == 0
                     else f"{allowed + 1} times")
            status, payload = "error", SimulatorError(
                f"the Dask workers running this analysis died {tries} "
                "(KilledWorker; distributed.scheduler.allowed-failures)", kind="crash")
        except Exception as exc:  # noqa: BLE001 - cancelled, lost, or the task raised
            text = str(exc).splitlines()[0] if str(exc) else ""
            status, payload = "error", SimulatorError(
                f"on the Dask cluster: {type(exc).__name__}: {text}".rstrip(": "))
        future.release()
        if status == "ok":
            return payload
        return SimulatorError(payload.problem, place=request.label, kind=payload.kind)
