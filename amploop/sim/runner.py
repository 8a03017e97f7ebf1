"""Running analyses through the journal: reuse what is recorded, simulate the rest.

The one way strategies and commands run simulations, so that every analysis is recorded
and counted the same way.
"""

from __future__ import annotations

from collections.abc import Hashable, Iterable, Iterator
from dataclasses import dataclass, field

from amploop.bench.requests import AnalysisOutput, AnalysisRequest
from amploop.errors import SimulatorError
from amploop.sim.journal import Journal, analysis_key
from amploop.sim.pool import WorkerPool

__all__ = ["Runner"]


def _transients(request: AnalysisRequest) -> int:
    return sum(step.command.split()[0].lower() == "tran" for step in request.steps)


@dataclass
class Runner:
    """Runs analysis requests on a pool, through an optional journal.

    Attributes
    ----------
    pool
        The worker processes.
    journal
        Where finished analyses are recorded and looked up (None: no reuse).
    digests
        Content hashes of the files the decks read (part of every key).
    ac_run, ac_reused
        AC analyses simulated, and AC analyses taken from the journal.
    simulator_seconds
        Wall time, seconds, the workers spent inside ngspice on the requests simulated.
    simulator_cpu_seconds
        CPU time, seconds, of the workers during those requests.
    transient_run, transient_reused
        Transient analyses simulated, and transient analyses taken from the journal.
    """

    pool: WorkerPool
    journal: Journal | None = None
    digests: dict[str, str] = field(default_factory=dict)
    ac_run: int = 0
    ac_reused: int = 0
    simulator_seconds: float = 0.0  # wall time the workers spent inside ngspice
    simulator_cpu_seconds: float = 0.0  # CPU time of the workers inside ngspice
    transient_run: int = 0
    transient_reused: int = 0

    def key_of(self, request: AnalysisRequest) -> str:
        """The journal key of ``request``."""
        return analysis_key(request, self.digests)

    def run(self, items: Iterable[tuple[Hashable, AnalysisRequest]]
            ) -> Iterator[tuple[Hashable, AnalysisOutput | SimulatorError, bool]]:
        """Yield ``(tag, output or error, reused)`` for every item, as each is ready.

        Recorded analyses come first (without simulating); the others run on the pool and
        are recorded as soon as each finishes (committed in batches, and all of them once
        the last one is in). Failed analyses are not recorded, so a rerun tries them again.

        Parameters
        ----------
        items
            ``(tag, request)`` pairs; requests with the same journal key are run once and
            yielded once per tag.
        """
        by_key: dict[str, list[Hashable]] = {}
        requests: dict[str, AnalysisRequest] = {}
        for tag, request in items:
            key = analysis_key(request, self.digests)
            if key in by_key:
                by_key[key].append(tag)
                continue
            by_key[key] = [tag]
            requests[key] = request
        misses = []
        for key, request in requests.items():
            stored = self.journal.get(key) if self.journal is not None else None
            if stored is None:
                misses.append((key, request))
                continue
            self.ac_reused += request.ac_runs * len(by_key[key])
            self.transient_reused += _transients(request) * len(by_key[key])
            for tag in by_key[key]:
                yield tag, stored, True
        for key, output in self.pool.run(misses):
            request = requests[key]
            if isinstance(output, AnalysisOutput):
                self.simulator_seconds += output.seconds
                self.simulator_cpu_seconds += output.cpu_seconds
                self.ac_run += request.ac_runs
                self.transient_run += _transients(request)
                self.ac_reused += request.ac_runs * (len(by_key[key]) - 1)
                if self.journal is not None:
                    self.journal.put(key, request.label, request, output)
            for tag in by_key[key]:
                yield tag, output, False
        if self.journal is not None:
            self.journal.commit()
