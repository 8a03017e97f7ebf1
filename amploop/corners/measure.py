"""``amploop measure``: the loop gain and margins of the amplifier at every corner.

Callable from Python as :func:`measure`; the command line is a thin layer over it.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse
from amploop.analysis.margins import Margins
from amploop.bench.amplifier import Amplifier, prepare_amplifier
from amploop.bench.testbench import Testbench, build_testbench
from amploop.corners.outputs import (
    OutFolder,
    loop_gain_csv,
    remove_stale,
    write_into,
)
from amploop.corners.portable_decks import DECKS, NO_COPIES, PortableIncludes, copy_includes
from amploop.corners.results import (
    CornerResult,
    MeasureResult,
    assess_common_mode,
    assess_loop_gain,
)
from amploop.errors import AmploopError
from amploop.sim.journal import Journal, file_digests
from amploop.sim.pool import WorkerPool, default_workers
from amploop.sim.runner import Runner
from amploop.spec.model import Corner, Job
from amploop.spec.names import safe_filename

__all__ = ["CornerWork", "corner_files", "measure"]

#: The journal's file name inside an out folder.
JOURNAL_FILE = "journal.sqlite"


def corner_files(corners: tuple[Corner, ...]) -> dict[str, str]:
    """A unique, file-name-safe stem per corner name of ``corners`` (``-2``, ``-3``, ...
    added where two stems would otherwise be the same, ignoring case)."""
    stems: dict[str, str] = {}
    used: set[str] = set()
    for corner in corners:
        stem = safe_filename(corner.name)
        candidate, n = stem, 2
        while candidate.lower() in used:
            candidate, n = f"{stem}-{n}", n + 1
        used.add(candidate.lower())
        stems[corner.name] = candidate
    return stems


def result_from_output(bench: Testbench, output, amplifier: Amplifier | None = None
                       ) -> CornerResult:
    """Turn a worker's answer (output or SimulatorError) into a corner result."""
    if isinstance(output, AmploopError):
        problem = output.problem
        kind = getattr(output, "kind", "failed")
        if amplifier is not None and kind == "parse":
            problem = amplifier.locate_parse_error(problem)
        return CornerResult(corner=bench.corner, status="error", error=problem,
                            error_kind=kind)
    try:
        response = bench.loop_gain(output)
    except (ValueError, KeyError) as exc:
        return CornerResult(corner=bench.corner, status="error",
                            error=f"unusable simulator output: {exc}")
    if not np.all(np.isfinite(response.values)):
        return CornerResult(corner=bench.corner, status="error",
                            error="the simulator returned non-finite loop-gain values")
    op = bench.operating_point(output)
    cm_response = bench.common_mode_loop_gain(output)
    # figures a worker already read off (CornerWork), else read them here
    margins, status, reason, common_mode = output.after if output.after is not None else \
        corner_figures(bench, response, op, cm_response)
    return CornerResult(
        corner=bench.corner,
        status=status,
        error=reason if status == "error" else None,
        margins=margins,
        loop_gain=response,
        warnings=output.warnings,
        operating_point=op,
        suspect_reason=reason if status == "suspect" else None,
        common_mode=common_mode,
        common_mode_loop_gain=cm_response,
        measures_common_mode=bench.loops.common_mode is not None,
        closed_loop=bench.closed_loop_response(output) if bench.loops.closed_loop else None,
    )


def corner_figures(bench: Testbench, response: FrequencyResponse, op,
                   cm_response: FrequencyResponse | None) -> tuple:
    """The margins of ``response``, the loop gain of a finished analysis of ``bench`` with
    the operating point ``op``, its status and reason
    (:func:`~amploop.corners.results.assess_loop_gain`), and the margins of
    ``cm_response``, the common-mode loop gain (None when not measured). A common-mode
    loop that is negative at DC makes the corner an error, one that never crosses 0 dB
    makes it suspect, each saying so."""
    probe = bench.op_probe
    margins, status, reason = assess_loop_gain(response, op, probe and probe.limits)
    if cm_response is None:
        return margins, status, reason, None
    common_mode, problem = assess_common_mode(cm_response)
    if problem is not None and status != "error":
        status = "error" if "negative" in problem else "suspect"
        reason = problem if reason is None else f"{reason}; {problem}"
    return margins, status, reason, common_mode


@dataclass(frozen=True)
class CornerWork:
    """What a local worker does with a corner's finished analysis before sending it back:
    the margins (:func:`assess_loop_gain`) and the corner's two files in the out folder,
    the loop-gain CSV and the deck to rerun by hand.

    Done in the worker that ran the analysis, so that with as many workers as cores the
    coordinator only records results and never becomes the bottleneck. Paths are
    relative to ``folder`` (absolute). Returns ``(margins, status, reason)``; a write that fails
    raises :class:`~amploop.errors.OutputError` there, the output comes back without its
    ``after``, and the coordinator then does the work itself and reports it.

    Attributes
    ----------
    bench
        The corner's testbench.
    folder
        The out folder (absolute).
    csv
        Where the loop-gain CSV goes, relative to ``folder`` (the common-mode loop's
        gets ``-cm`` before the suffix).
    deck
        Where the deck to rerun by hand goes, relative to ``folder``.
    data_file
        The file that deck writes its loop gain to, relative to where ngspice runs it.
    includes
        Where the files the deck reads were copied (:func:`~amploop.corners.portable_decks.copy_includes`),
        so that the deck names them relative to itself.
    """

    bench: Testbench
    folder: Path
    csv: str
    deck: str
    data_file: str
    includes: PortableIncludes = NO_COPIES

    @classmethod
    def for_corner(cls, bench: Testbench, folder: Path, stem: str,
                   includes: PortableIncludes = NO_COPIES) -> CornerWork:
        """The work for one corner: its testbench ``bench``, the out folder ``folder``
        (absolute), its files named from ``stem`` (:func:`corner_files`), and where the
        files its deck reads were copied (``includes``)."""
        return cls(bench=bench, folder=folder, csv=f"loop_gain/{stem}.csv",
                   deck=f"{DECKS}/{stem}.cir", data_file=f"{stem}-loop_gain.txt",
                   includes=includes)

    def files(self, result: CornerResult) -> list[str]:
        """The files :meth:`write_files` writes for the corner's ``result``, relative to
        the folder."""
        return ([self.deck] + ([self.csv] if result.loop_gain is not None else [])
                + ([self.cm_csv] if result.common_mode_loop_gain is not None else []))

    @property
    def cm_csv(self) -> str:
        """Where the common-mode loop's CSV goes, relative to the folder."""
        return self.csv.removesuffix(".csv") + "-cm.csv"

    def write_files(self, response: FrequencyResponse | None,
                    cm_response: FrequencyResponse | None = None) -> None:
        """The deck to rerun by hand (naming the files it reads relative to itself), and the
        loop-gain CSVs when there is a loop gain (``response``, and ``cm_response`` of the
        common-mode loop); written in place (a rerun writes them again)."""
        deck = self.includes.rewrite(self.bench.hand_deck(data_file=self.data_file))
        write_into(self.folder, self.deck, deck, atomic=False)
        if response is not None:
            write_into(self.folder, self.csv, loop_gain_csv(response), atomic=False)
        if cm_response is not None:
            write_into(self.folder, self.cm_csv, loop_gain_csv(cm_response), atomic=False)

    def __call__(self, output) -> tuple[Margins, str, str | None, Margins | None]:
        response = self.bench.loop_gain(output)
        cm_response = self.bench.common_mode_loop_gain(output)
        figures = corner_figures(self.bench, response, self.bench.operating_point(output),
                                 cm_response)
        self.write_files(response, cm_response)
        return figures


def measure(
    job: Job,
    *,
    out: str | Path | None = None,
    overrides: dict[str, float] | None = None,
    workers: int | None = None,
    pool: WorkerPool | None = None,
    allow_control: bool = False,
    progress: Callable[[int, int, CornerResult], None] | None = None,
    time_domain: bool = True,
    finish: Callable[[MeasureResult], None] | None = None,
) -> MeasureResult:
    """Measure the loop gain and margins at every corner of ``job``.

    Parameters
    ----------
    job
        A loaded job (:func:`amploop.spec.job.load_job`).
    out
        Out folder for results.json, per-corner CSVs and decks; None writes nothing.
    overrides
        Compensation values by role (SI), e.g. ``{"cc": 1.5e-12}``.
    workers
        Worker processes when no ``pool`` is given (default: the CPU count).
    pool
        An existing worker pool to use.
    allow_control
        Accept ``.control`` blocks in the user's files.
    progress
        Called after each corner with (done, total, result).
    time_domain
        Also run the closed-loop step check per corner (for the report; one transient
        each, journalled like the AC analyses).
    finish
        Called with the result once results.json is written, while the out folder is still
        held, so that nothing changes the folder before it is done (the command line
        prints the table and draws the report there).

    Returns
    -------
    MeasureResult
        One :class:`CornerResult` per corner in the job's order. A failing corner never
        loses the others' results.
    """
    started = time.perf_counter()
    amplifier = prepare_amplifier(job, allow_control=allow_control)
    values = amplifier.values_in_effect(overrides)
    benches = {c.name: build_testbench(amplifier, c, values) for c in job.corners}
    if out is None:
        result = _measure_into(job, amplifier, values, benches, None, None, pool, workers,
                               progress, started, time_domain)
        if finish is not None:
            finish(result)
        return result
    folder = OutFolder(out)
    with folder.lock():
        with Journal(folder.path / JOURNAL_FILE) as journal:
            result = _measure_into(job, amplifier, values, benches, folder, journal, pool,
                                   workers, progress, started, time_domain)
        if finish is not None:
            finish(result)
    return result


def _measure_into(job, amplifier, values, benches, folder, journal, pool, workers, progress,
                  started, time_domain) -> MeasureResult:
    from amploop.corners.stepcheck import run_step_checks, step_stop_s

    stems = corner_files(job.corners)
    results: dict[str, CornerResult] = {}
    own_pool = pool is None
    pool = pool or WorkerPool(workers)
    runner = Runner(pool, journal, file_digests(amplifier.files))
    works = {}
    if folder is not None:
        includes = copy_includes(folder.path, next(iter(benches.values())).deck)
        works = {name: CornerWork.for_corner(b, folder.path, stems[name], includes)
                 for name, b in benches.items()}
    # with a core to spare the coordinator does this while the workers simulate; with
    # every core busy simulating, each worker does its own corners' share
    in_workers = folder is not None and pool.shares_files and pool.size >= default_workers()
    requests = [(name, b.request(job.analysis.time_limit_s,
                                 after=works[name] if in_workers else None))
                for name, b in benches.items()]
    checks = {}
    interrupted = False
    try:
        for name, output, _reused in runner.run(requests):
            bench = benches[name]
            result = result_from_output(bench, output, amplifier)
            results[name] = result
            if folder is not None and getattr(output, "after", None) is None:
                # not done in a worker: taken from the journal, a remote or failed
                # analysis, or a worker whose write failed
                works[name].write_files(result.loop_gain, result.common_mode_loop_gain)
            if progress is not None:
                progress(len(results), len(benches), result)
        if time_domain:
            ok = tuple(results[c.name].corner for c in job.corners
                       if c.name in results and results[c.name].status == "ok")
            stop_s = step_stop_s(amplifier, [results[c.name].margins.unity_gain_hz
                                             for c in ok])
            checks = run_step_checks(amplifier, ok, values, runner, stop_s,
                                     job.analysis.time_limit_s)
    except KeyboardInterrupt:
        interrupted = True
        raise
    finally:
        if own_pool:
            pool.close()
        ordered = tuple(results[c.name] for c in job.corners if c.name in results)
        keys = {name: runner.key_of(r) for name, r in requests}
        result = MeasureResult(job=job, values=values, corners=ordered, ac_run=runner.ac_run,
                               ac_reused=runner.ac_reused,
                               out=folder.path if folder else None,
                               seconds=time.perf_counter() - started, keys=keys,
                               step_checks=checks,
                               transient_run=runner.transient_run,
                               transient_reused=runner.transient_reused,
                               simulator_seconds=runner.simulator_seconds,
                               warnings=amplifier.warnings
                               + (journal.notes() if journal is not None else ()))
        if folder is not None:
            data = result.as_json()
            if interrupted or len(ordered) < len(job.corners):
                data["status"] = "interrupted"
                data["message"] = (
                    f"interrupted after {len(ordered)} of {len(job.corners)} corners"
                    + ("" if len(ordered) < len(job.corners) else ", during the step checks")
                    + "; the same command again finishes the run, reusing every analysis "
                    "in the journal")
            folder.write_json("results.json", data)
    if folder is not None:
        remove_stale(folder.path, [f for name, r in results.items()
                                   for f in works[name].files(r)])
    return result

