"""``amploop tune``: choose Cc and Rc so the worst corner meets the target margin.

Callable from Python as :func:`tune`. Every analysis goes through the out folder's
journal, so a rerun (or ``--resume``) of the same job repeats none that finished; the
strategies are deterministic, so the rerun retraces the same steps and lands on the same
values. Without an out folder the journal is a temporary one and nothing is written.
"""

from __future__ import annotations

import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

from amploop.bench.amplifier import Amplifier, prepare_amplifier
from amploop.corners.measure import JOURNAL_FILE
from amploop.corners.outputs import OutFolder, remove_stale
from amploop.corners.results import SCHEMA, CornerResult, loops_entry, statistics_entry
from amploop.corners.stepcheck import run_step_checks, step_stop_s, with_step
from amploop.errors import JobError
from amploop.sim.journal import Journal, file_digests
from amploop.sim.pool import WorkerPool
from amploop.sim.runner import Runner
from amploop.spec.model import Job
from amploop.strategy import STRATEGIES, Evaluator, Outcome
from amploop.strategy.common import Evaluator as _Evaluator
from amploop.strategy.common import HistoryEntry, bounds_of
from amploop.strategy.devicemap import device_json
from amploop.strategy.finalfiles import compensated_netlist, remove_compensated, write_final_files
from amploop.strategy.remarks import (
    bound_remark,
    lead_zero_remark,
    mismatch_remark,
    second_stage_gm,
    settling_remark,
)
from amploop.strategy.samples import initial_samples
from amploop.strategy.settlemap import refuse_settling

__all__ = ["TuneResult", "tune"]


@dataclass(frozen=True)
class TuneResult:
    """A finished tuning run.

    Attributes
    ----------
    job
        The job tuned.
    strategy
        The strategy's name (``"map"``, ``"textbook"``).
    outcome
        What the strategy returned: status, values, the verified point, message.
    history
        Every simulated point, in order.
    ac_run, ac_reused
        AC analyses simulated, and AC analyses taken from the journal.
    out
        The out folder; None when nothing was written.
    seconds
        Wall time of the run, seconds.
    compensated
        The compensated netlist: ``{"path", "files", "diff"}`` (without an out folder
        ``path`` is None and ``files`` empty); None unless the run converged (a run that
        misses its target writes none).
    loop_gains
        (history step, corner name) -> the loop gain simulated there.
    simulator_seconds
        Wall time, seconds, the workers spent inside ngspice.
    simulator_cpu_seconds
        CPU time, seconds, of the workers inside ngspice.
    step_checks
        Corner name -> :class:`~amploop.corners.stepcheck.StepCheck` at the final values (empty
        when not run).
    transient_run, transient_reused
        Transient analyses simulated, and transient analyses taken from the journal.
    values_in_netlist
        The compensation values the netlist holds, by role, SI.
    warnings
        Remarks on the amplifier and on the tuned point, then the step checks' warnings,
        then the journal's notes (damaged records recomputed).
    """

    job: Job
    strategy: str
    outcome: Outcome
    history: tuple[HistoryEntry, ...]
    ac_run: int
    ac_reused: int
    out: Path | None
    seconds: float
    compensated: dict | None = None
    loop_gains: dict | None = None
    simulator_seconds: float = 0.0
    simulator_cpu_seconds: float = 0.0
    step_checks: dict = field(default_factory=dict)
    transient_run: int = 0
    transient_reused: int = 0
    values_in_netlist: dict = field(default_factory=dict)
    warnings: tuple = ()

    @property
    def status(self) -> str:
        return self.outcome.status

    @property
    def corners(self) -> tuple[CornerResult, ...]:
        return self.outcome.final.corners if self.outcome.final else ()

    def to_dataframe(self):
        """One row per corner at the final values, as :meth:`MeasureResult.to_dataframe
        <amploop.corners.results.MeasureResult.to_dataframe>`; needs pandas."""
        from amploop.corners.dataframes import corners_dataframe

        return corners_dataframe(self.corners)

    def to_frd(self) -> dict:
        """Corner name -> its loop gain at the final values as a python-control FRD
        (rad/s); needs python-control."""
        from amploop.corners.dataframes import corners_frd

        return corners_frd(self.corners)

    def as_json(self) -> dict:
        """The content of results.json for this tuning run."""
        target = self.job.target
        worst = self.outcome.final.worst if self.outcome.final else None
        return {
            "schema": SCHEMA,
            "command": "tune",
            "job": self.job.name,
            "strategy": self.strategy,
            "status": self.status,
            "message": self.outcome.message,
            "values": dict(self.outcome.values),
            "target": {
                "phase_margin_deg": target.phase_margin_deg,
                "tolerance_deg": target.tolerance_deg,
                "gain_margin_db": target.gain_margin_db,
                **({"common_mode_phase_margin_deg": target.common_mode_phase_margin_deg,
                    "common_mode_gain_margin_db": target.common_mode_gain_margin_db}
                   if self.job.amplifier.fully_differential else {}),
                **({"sigma": target.sigma} if target.sigma is not None else {}),
                **({"yield_fraction": target.yield_fraction}
                   if target.yield_fraction is not None else {}),
                "objective": target.objective,
                "settling_time_s": target.settling_time_s,
            },
            "corners": [with_step(c.as_json(), self.step_checks.get(c.corner.name))
                        for c in self.corners],
            "worst": None if worst is None else worst.as_json(),
            "ac_analyses": {"run": self.ac_run, "reused": self.ac_reused},
            "transient_analyses": {"run": self.transient_run, "reused": self.transient_reused},
            "probe": self.job.analysis.probe,
            **loops_entry(self.job),
            "job_file": str(self.job.path),
            "values_in_netlist": dict(self.values_in_netlist),
            "bounds": {role: [k.minimum, k.maximum] for role, k in self.job.compensation.items()},
            "history": [h.as_json() for h in self.history],
            "compensated_netlist": self.compensated,
            "device": device_json(self.outcome.extra.get("device")),
            # per corner: predicted and simulated settling time (tuning for settling)
            "settling_prediction": self.outcome.extra.get("settling"),
            # the map strategy's form ("one-impedance", "two-element") and method ("ports",
            # "samples"); None for other strategies
            "map_form": self.outcome.extra.get("map_form"),
            "map_method": self.outcome.extra.get("map_method"),
            "warnings": list(self.warnings),
            "seconds": self.seconds,
            **statistics_entry(self.job, self.corners),
        }


def _step_warnings(checks: dict) -> tuple[str, ...]:
    return tuple(c.warning for c in checks.values() if getattr(c, "warning", None))


def _report_samples(evaluator: _Evaluator) -> list[dict[str, float]]:
    knobs = evaluator.amplifier.job.compensation
    in_effect = evaluator.full_values({})
    rc_bounds = bounds_of(knobs.get("rc"), in_effect.get("rc", 0.0))
    rc = min(max(in_effect.get("rc", 0.0), rc_bounds[0]), rc_bounds[1])
    samples = initial_samples(bounds_of(knobs["cc"], in_effect["cc"]), rc)
    if "rc" not in in_effect:
        samples = [{"cc": p["cc"]} for p in samples]
    return samples


def tune(
    job: Job,
    *,
    out: str | Path | None = None,
    strategy: str = "map",
    workers: int | None = None,
    pool: WorkerPool | None = None,
    allow_control: bool = False,
    resume: bool = False,
    progress: Callable[[HistoryEntry], None] | None = None,
    time_domain: bool = True,
    finish: Callable[[TuneResult], None] | None = None,
) -> TuneResult:
    """Tune the compensation of ``job`` at all its corners.

    Parameters
    ----------
    job
        A loaded job with a ``[target]`` table and bounds on its compensation.
    out
        The out folder (results.json, journal, compensated netlist, decks); None writes
        nothing (the journal is a temporary one, removed at the end).
    strategy
        ``"map"`` (default) or ``"textbook"``.
    workers, pool
        Worker processes (default: the CPU count), or an existing pool.
    allow_control
        Accept ``.control`` blocks in the user's files.
    resume
        Require an existing journal in ``out`` (a rerun without it reuses one too).
    progress
        Called after every simulated point with its history entry.
    time_domain
        Run the closed-loop step check per corner at the final values (for the report).
    finish
        Called with the result once results.json is written, while the out folder is still
        held (the command line prints the results and draws the report there).

    Returns
    -------
    TuneResult
        Its ``status`` is "converged", "infeasible" or "failed" (Ctrl-C raises
        KeyboardInterrupt after writing results.json with status "interrupted", the
        history so far and the command that resumes); the figures are from the
        final verifying simulation.
    """
    if job.target is None:
        raise JobError("tuning needs a [target] table (phase_margin, tolerance, gain_margin)",
                       file=job.path, place="[target]")
    if "cc" not in job.compensation or job.compensation["cc"].minimum is None or \
            job.compensation["cc"].maximum is None:
        raise JobError("tuning needs bounds on Cc: cc = { ..., min = \"0.1p\", max = \"20p\" }",
                       file=job.path, place="[compensation].cc")
    rc_knob = job.compensation.get("rc")
    if rc_knob is not None and (rc_knob.minimum is None or rc_knob.maximum is None):
        raise JobError("tuning needs bounds on Rc: rc = { ..., min = \"0\", max = \"50k\" }",
                       file=job.path, place="[compensation].rc")
    if strategy not in STRATEGIES:
        from amploop.errors import did_you_mean

        raise JobError(f"unknown strategy {strategy!r}" + did_you_mean(strategy, list(STRATEGIES)))
    started = time.perf_counter()
    amplifier = prepare_amplifier(job, allow_control=allow_control)
    if job.target.statistical and (strategy != "map" or amplifier.device is not None):
        raise JobError("a sigma or yield target is tuned by the map strategy with a resistor "
                       "for Rc only", file=job.path,
                       place="[target].sigma" if job.target.sigma is not None
                       else "[target].yield")
    refuse_settling(job, amplifier, strategy)
    if out is None:
        if resume:
            raise JobError("nothing to resume without an out folder",
                           hint="give the out folder of the run to resume")
        with tempfile.TemporaryDirectory(prefix="amploop-tune-") as scratch, \
                Journal(Path(scratch) / JOURNAL_FILE) as journal:
            return _tune_into(job, amplifier, None, journal, strategy, workers, pool,
                              progress, time_domain, finish, started)
    folder = OutFolder(out)
    journal_path = folder.path / JOURNAL_FILE
    if resume and not journal_path.exists():
        raise JobError("nothing to resume: this out folder has no journal", file=folder.path,
                       hint="run without --resume to start")
    with folder.lock(), Journal(journal_path) as journal:
        return _tune_into(job, amplifier, folder, journal, strategy, workers, pool, progress,
                          time_domain, finish, started)


def _tune_into(job: Job, amplifier: Amplifier, folder: OutFolder | None, journal: Journal,
               strategy, workers, pool, progress, time_domain, finish, started) -> TuneResult:
    """The body of :func:`tune`, with the out folder held (None: nothing written)."""
    own_pool = pool is None
    pool = pool or WorkerPool(workers)
    runner = Runner(pool, journal, file_digests(amplifier.files))
    evaluator = Evaluator(amplifier, job.corners, runner, job.analysis.time_limit_s)
    evaluator.progress = progress
    try:
        outcome = _refuse_suspect(STRATEGIES[strategy](evaluator, job.target))
        outcome, remarks = _with_remarks(evaluator, outcome)
        if outcome.final is not None and time_domain and not any(
                h.kind == "characterise" for h in evaluator.history):
            # the report's map page and the what-if page need three samples per corner;
            # journalled like the rest, kept apart in the history
            samples = _report_samples(evaluator)
            if any(h.kind == "characterise-ports" for h in evaluator.history):
                samples = [samples[0], samples[2]]  # the middle one is the port reference
            evaluator.simulate(samples, kind="report-map",
                               note="samples for the report's compensation map")
        checks = outcome.extra.pop("step_checks", None) or {}
        if outcome.final is not None and time_domain and not checks:
            ok = tuple(c.corner for c in outcome.final.corners if c.status == "ok")
            stop_s = step_stop_s(amplifier, [c.margins.unity_gain_hz for c in
                                             outcome.final.corners if c.status == "ok"])
            device = outcome.extra.get("device")
            vt = {n: c["vt"] for n, c in device["corners"].items()} if device else None
            checks = run_step_checks(amplifier, ok, outcome.values, runner, stop_s,
                                     job.analysis.time_limit_s, device_vt=vt)
    except KeyboardInterrupt:
        if folder is not None:
            _write_interrupted(folder, amplifier, strategy, evaluator, runner, started)
        raise
    finally:
        if own_pool:
            pool.close()
    compensated = None
    if outcome.status == "converged":
        compensated = compensated_netlist(amplifier, outcome.values, folder)
    elif folder is not None:
        remove_compensated(folder, amplifier)
    if folder is not None:
        corner_files_written = []
        if outcome.final is not None:
            corner_files_written = write_final_files(folder, amplifier, outcome)
        remove_stale(folder.path, corner_files_written)
    result = TuneResult(job=job, strategy=strategy, outcome=outcome,
                        history=tuple(evaluator.history), ac_run=runner.ac_run,
                        ac_reused=runner.ac_reused, out=folder.path if folder else None,
                        seconds=time.perf_counter() - started, compensated=compensated,
                        loop_gains=dict(evaluator.loop_gains),
                        simulator_seconds=runner.simulator_seconds,
                        simulator_cpu_seconds=runner.simulator_cpu_seconds, step_checks=checks,
                        transient_run=runner.transient_run,
                        transient_reused=runner.transient_reused,
                        values_in_netlist=amplifier.values_in_effect({}),
                        warnings=amplifier.warnings + remarks + _step_warnings(checks)
                        + journal.notes())
    if folder is not None:
        folder.write_json("results.json", result.as_json())
    journal.commit()
    if finish is not None:
        finish(result)
    return result


def _with_remarks(evaluator: _Evaluator, outcome: Outcome) -> tuple[Outcome, tuple[str, ...]]:
    """The outcome with a note on values at or near their bounds added to its message, and
    the warning on a lead zero below the unity-gain frequency (when the job names the
    second-stage device and tunes a resistor for Rc)."""
    if outcome.final is None or outcome.final.worst is None:
        return outcome, ()
    job = evaluator.amplifier.job
    outcome = replace(outcome, message=outcome.message
                      + bound_remark(outcome.values, job.compensation,
                                     objective=job.target.objective))
    remarks = tuple(r for r in (mismatch_remark(job, outcome.extra),
                                settling_remark(job, outcome.extra)) if r)
    if "rc" not in job.compensation:
        return outcome, remarks
    gm2 = second_stage_gm(evaluator)
    lead = gm2 and lead_zero_remark(outcome.values, outcome.final.corners, gm2)
    return outcome, remarks + ((lead,) if lead else ())


def _refuse_suspect(outcome: Outcome) -> Outcome:
    """``outcome``, or "failed" when it claims convergence with a corner that is not "ok"
    (a suspect corner's margins describe a broken operating point)."""
    if outcome.status != "converged" or outcome.final is None:
        return outcome
    bad = next((c for c in outcome.final.corners if c.status != "ok"), None)
    if bad is None:
        return outcome
    return Outcome("failed", outcome.values, outcome.final,
                   f"not converged: corner {bad.corner.name} is {bad.status}: {bad.problem}",
                   outcome.extra)


def _write_interrupted(folder: OutFolder, amplifier: Amplifier, strategy: str,
                       evaluator: _Evaluator, runner: Runner, started: float) -> None:
    """results.json of a run stopped by Ctrl-C: status "interrupted", every point simulated
    so far in the history, the analyses counted, and the command that resumes it (and no
    compensated netlist of an earlier run left to read as this one's)."""
    job = amplifier.job
    remove_compensated(folder, amplifier)
    command = f"amploop tune {job.path} --out {folder.path}"
    if strategy != "map":
        command += f" --strategy {strategy}"
    message = (f"interrupted after {len(evaluator.history)} simulated points "
               f"({runner.ac_run + runner.ac_reused} AC analyses); `{command} --resume` "
               "continues from the journal")
    result = TuneResult(job=job, strategy=strategy,
                        outcome=Outcome("interrupted", {}, None, message),
                        history=tuple(evaluator.history), ac_run=runner.ac_run,
                        ac_reused=runner.ac_reused, out=folder.path,
                        seconds=time.perf_counter() - started,
                        simulator_seconds=runner.simulator_seconds,
                        simulator_cpu_seconds=runner.simulator_cpu_seconds,
                        transient_run=runner.transient_run,
                        transient_reused=runner.transient_reused,
                        values_in_netlist=amplifier.values_in_effect({}),
                        warnings=amplifier.warnings)
    folder.write_json("results.json", result.as_json())
