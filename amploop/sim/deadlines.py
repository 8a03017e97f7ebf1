"""Analyses on a Dask cluster, each with a deadline kept by the coordinator.

The time limit of an analysis is enforced inside its task, by the Dask worker's local
pool. That is no help when the Dask worker itself stops (SIGSTOP, a frozen virtual
machine, a network cut): it holds its tasks until the scheduler drops it, minutes later
(``distributed.scheduler.worker-ttl``), and a running Dask task cannot be cancelled. So
the coordinator keeps a deadline of its own for every analysis it hands over:

- At most ``slots`` analyses (twice the cluster's threads) are on the cluster at a time,
  so an analysis waits behind at most one other on its worker, which has its own limit.
- An analysis that has not come back within twice its time limit plus ``grace_s`` of
  being handed over is cancelled and handed over again, to the other workers: the worker
  that held it is left out for the rest of the run. It is retried as a local analysis
  whose worker crashed is, at most ``retries`` times; then it reports a SimulatorError.
- A finished analysis's arrays stay on the worker that ran it until they are fetched; a
  worker that stops between finishing and being asked for them would hold the fetch for
  ever. So the fetch has a deadline too (``grace_s``): one that misses it counts as a late
  analysis, and the worker holding the arrays is left out like a stopped one.
- A lost scheduler ends the run with one SimulatorError.
"""

from __future__ import annotations

import threading
import time
from collections import deque
from collections.abc import Callable, Hashable, Iterable, Iterator
from dataclasses import dataclass

from amploop.bench.requests import AnalysisOutput, AnalysisRequest
from amploop.errors import SimulatorError

__all__ = ["deadline_s", "run_with_deadlines"]


def deadline_s(request: AnalysisRequest, grace_s: float) -> float:
    """Seconds an analysis handed to the cluster may take to come back: its own time
    limit, once for an analysis it may wait behind and once for itself, plus ``grace_s``
    for the network, the files and the start of the worker's ngspice process.

    Parameters
    ----------
    request
        The analysis (its ``time_limit_s``).
    grace_s
        Seconds added.
    """
    return 2 * request.time_limit_s + grace_s


@dataclass
class _Attempt:
    key: Hashable
    request: AnalysisRequest
    attempt: int = 0
    future: object = None
    deadline: float = 0.0


def run_with_deadlines(
    client,
    requests: Iterable[tuple[Hashable, AnalysisRequest]],
    submit: Callable[[AnalysisRequest, list[str] | None], object],
    outcome: Callable[[object, AnalysisRequest, float], AnalysisOutput | SimulatorError],
    *,
    slots: int,
    retries: int,
    grace_s: float,
    address: str,
) -> Iterator[tuple[Hashable, AnalysisOutput | SimulatorError]]:
    """Run every request on the cluster; yield ``(key, output or error)`` as each ends.

    Parameters
    ----------
    client
        The ``distributed.Client``.
    requests
        ``(key, request)`` pairs.
    submit
        ``submit(request, workers)``: hands one analysis to the cluster, on ``workers``
        (addresses) or on any worker when None; returns its future.
    outcome
        ``outcome(future, request, timeout_s)``: the finished future's output or
        SimulatorError, fetched within ``timeout_s`` seconds; raises ``TimeoutError`` when
        the worker holding it does not answer in time.
    slots
        Most analyses on the cluster at a time.
    retries
        How many times a late analysis is handed over again.
    grace_s
        Seconds added to each deadline (:func:`deadline_s`).
    address
        The scheduler's address, for the message when it is lost.

    Raises
    ------
    SimulatorError
        When the connection to the scheduler is lost.
    """
    waiting = deque(_Attempt(key, request) for key, request in requests)
    flying: dict[str, _Attempt] = {}
    left_out: set[str] = set()
    workers: list[str] | None = None  # None: any worker
    wake = threading.Event()  # set (in the client's thread) whenever a future finishes

    def top_up() -> None:
        while waiting and len(flying) < slots:
            attempt = waiting.popleft()
            attempt.future = submit(attempt.request, workers)
            attempt.future.add_done_callback(lambda _: wake.set())
            attempt.deadline = time.monotonic() + deadline_s(attempt.request, grace_s)
            flying[attempt.future.key] = attempt

    def hand_over_again(late: list[_Attempt], holders: set[str]) -> list[_Attempt]:
        """Leave ``holders`` out, queue each late attempt again; those out of retries."""
        nonlocal left_out, workers
        left_out |= holders
        workers = [w for w in _workers(client) if w not in left_out] or None
        given_up = []
        for attempt in late:
            if attempt.attempt < retries:
                waiting.appendleft(_Attempt(attempt.key, attempt.request, attempt.attempt + 1))
            else:
                given_up.append(attempt)
        return given_up

    try:
        while waiting or flying:
            top_up()
            nearest = min(a.deadline for a in flying.values())
            done = [flying.pop(future.key) for future in _first_done(
                client, [a.future for a in flying.values()], wake, nearest, address)]
            now = time.monotonic()
            late = [a for a in flying.values() if a.deadline <= now]
            given_up = []
            if late:
                holders = _holders(client, {a.future.key for a in late})
                client.cancel([a.future for a in late])
                for attempt in late:
                    del flying[attempt.future.key]
                given_up = hand_over_again(late, holders)
            top_up()  # the cluster works on while the caller records what came back
            for attempt in done:
                try:
                    result = outcome(attempt.future, attempt.request, grace_s)
                except TimeoutError:  # its arrays sit on a worker that does not answer
                    holders = _keepers(client, attempt.future)
                    client.cancel([attempt.future])
                    given_up += hand_over_again([attempt], holders)
                    continue
                yield attempt.key, result
            for attempt in given_up:
                limit = deadline_s(attempt.request, grace_s)
                yield attempt.key, SimulatorError(
                    f"no answer from the Dask cluster within {limit:g} s (twice the time "
                    f"limit plus {grace_s:g} s), {attempt.attempt + 1} attempts: its workers "
                    "are stopped, cut off or overloaded", place=attempt.request.label,
                    kind="timeout")
    finally:
        if flying and client.status == "running":
            client.cancel([a.future for a in flying.values()])


def _lost(address: str) -> SimulatorError:
    return SimulatorError(f"lost the connection to the Dask scheduler at {address}",
                          hint="finished analyses are kept in the journal: the same command "
                          "reuses them once the scheduler is back", kind="crash")


def _first_done(client, futures: list, wake: threading.Event, until: float,
                address: str) -> list:
    """The futures that are done, waiting for the first one until ``until`` (monotonic
    clock; ``wake`` is set whenever one finishes)."""
    while True:
        wake.clear()
        done = [f for f in futures if f.status != "pending"]
        if client.status != "running":
            raise _lost(address)
        if done or time.monotonic() >= until:
            return done
        wake.wait(max(0.0, until - time.monotonic()))


def _holders(client, keys: set[str]) -> set[str]:
    """The addresses of the workers processing any of ``keys``."""
    return {worker for worker, held in client.processing().items() if keys & set(held)}


def _keepers(client, future) -> set[str]:
    """The addresses of the workers holding a finished ``future``'s result."""
    try:
        return set(client.who_has([future]).get(future.key, ()))
    except Exception:  # noqa: BLE001 - the scheduler forgot it: nobody to leave out
        return set()


def _workers(client) -> list[str]:
    return sorted(client.scheduler_info().get("workers", {}))
