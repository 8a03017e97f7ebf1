"""What a measurement gives back: one :class:`CornerResult` per corner (its loop gain,
margins, operating point and status) and the :class:`MeasureResult` over all corners,
with its results.json form (``SCHEMA``)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from amploop.analysis.loopgain import FrequencyResponse
from amploop.analysis.margins import Margins, loop_margins
from amploop.bench.oppoint import OperatingPoint, corner_status
from amploop.spec.limits import OperatingPointLimits
from amploop.spec.model import Corner, Job
from amploop.spice.labels import JOURNAL_KEY

#: The version of results.json's layout (2: each per-corner fact once, in a list of corner
#: records with a ``name``, ``device.corners`` too).
SCHEMA = 2

__all__ = ["SCHEMA", "CornerResult", "MeasureResult", "assess_common_mode", "assess_loop_gain",
           "loops_entry", "statistics_entry"]


@dataclass(frozen=True)
class CornerResult:
    """One corner's measurement.

    ``status`` is ``"ok"``, ``"suspect"`` or ``"error"``. On error ``error`` says why and
    the margins hold what could still be read (possibly nothing). A suspect corner has its
    margins, but the operating point behind them is broken or its DC loop gain too low
    (:func:`~amploop.bench.oppoint.corner_status`); ``suspect_reason`` says which.

    Attributes
    ----------
    corner
        The corner measured.
    status
        ``"ok"``, ``"suspect"`` or ``"error"``.
    error
        Why the corner failed (the simulator's problem, or why its loop gain is unusable);
        None unless it is ``"error"``.
    margins
        The margins read off the loop gain; None when there is no loop gain.
    loop_gain
        The measured loop gain; None when the analysis failed or its output was unusable.
    warnings
        The simulator's warnings of its analysis (gmin stepping, transient-op fallback).
    operating_point
        The DC operating point of its analysis; None when it could not be read.
    suspect_reason
        Why a ``"suspect"`` corner's margins cannot be trusted (one sentence); else None.
    error_kind
        The :attr:`~amploop.errors.SimulatorError.kind` of the simulator's failure when
        its analysis failed (``"parse"``: ngspice refused the deck); None otherwise (also
        for a loop gain that was simulated but is unusable).
    common_mode
        The common-mode feedback loop's margins of a fully-differential amplifier; None
        when that loop was not measured.
    common_mode_loop_gain
        The common-mode loop's gain; None when not measured.
    measures_common_mode
        Whether the job measures a common-mode loop (its results.json entry then has a
        ``common_mode`` table, null where the figures are missing).
    closed_loop
        The closed-loop response from the signal source to the output, V/V, when the
        analysis ran it (tuning for settling); None otherwise.
    """

    corner: Corner
    status: str
    error: str | None = None
    margins: Margins | None = None
    loop_gain: FrequencyResponse | None = field(default=None, repr=False)
    warnings: tuple[str, ...] = ()
    operating_point: OperatingPoint | None = None
    suspect_reason: str | None = None
    error_kind: str | None = None
    common_mode: Margins | None = None
    common_mode_loop_gain: FrequencyResponse | None = field(default=None, repr=False)
    measures_common_mode: bool = False
    closed_loop: FrequencyResponse | None = field(default=None, repr=False)

    @property
    def problem(self) -> str | None:
        """Why the corner is not ``"ok"`` (its error or its suspect reason); None when it is."""
        return self.error or self.suspect_reason

    def to_frd(self):
        """The loop gain as a python-control FRD (angular frequency, rad/s); None when the
        corner has none (:func:`~amploop.corners.dataframes.corner_frd`)."""
        from amploop.corners.dataframes import corner_frd

        return corner_frd(self)

    def as_json(self) -> dict:
        """The corner's entry in results.json: the corner, status, error, figures, warnings."""
        figures = _figures(self.margins)
        common_mode = {"common_mode": _figures(self.common_mode)} \
            if self.measures_common_mode else {}
        configuration = {} if self.corner.configuration is None else {
            "configuration": self.corner.configuration}
        if self.corner.sample is not None:
            configuration["sample"] = self.corner.sample.as_json()
        return {
            "name": self.corner.name,
            **configuration,
            "lib": self.corner.lib,
            "temp": self.corner.temp,
            "params": dict(self.corner.params),
            "status": self.status,
            "error": self.error,
            "suspect_reason": self.suspect_reason,
            **figures,
            **common_mode,
            "operating_point": self.operating_point and self.operating_point.as_json(),
            "warnings": list(self.warnings),
        }


@dataclass(frozen=True)
class MeasureResult:
    """The whole measurement: values in effect, every corner, analysis counts.

    Attributes
    ----------
    job
        The job measured.
    values
        The compensation values in effect by role, SI (the netlist's with the overrides).
    corners
        One result per corner, in the job's order.
    ac_run, ac_reused
        AC analyses simulated, and AC analyses taken from the journal.
    out
        The out folder; None when nothing was written.
    seconds
        Wall time of the measurement, seconds.
    keys
        Corner name -> journal key of its loop-gain analysis.
    step_checks
        Corner name -> :class:`~amploop.corners.stepcheck.StepCheck` (empty when not run).
    transient_run, transient_reused
        Transient analyses simulated, and transient analyses taken from the journal.
    simulator_seconds
        Wall time the workers spent inside ngspice on the analyses simulated, seconds.
    warnings
        Remarks on the amplifier for the user (:attr:`~amploop.bench.amplifier.Amplifier.warnings`),
        then the journal's (:meth:`~amploop.sim.journal.Journal.notes`: damaged records recomputed).
    """

    job: Job
    values: dict[str, float]
    corners: tuple[CornerResult, ...]
    ac_run: int
    ac_reused: int
    out: Path | None
    seconds: float = 0.0
    keys: dict = field(default_factory=dict)  # corner -> journal key of its analysis
    step_checks: dict = field(default_factory=dict)
    transient_run: int = 0
    transient_reused: int = 0
    simulator_seconds: float = 0.0
    warnings: tuple[str, ...] = ()

    @property
    def status(self) -> str:
        """``"failed"`` when a corner failed, else ``"suspect"`` when one is suspect, else
        ``"ok"``."""
        if any(c.status == "error" for c in self.corners):
            return "failed"
        return "suspect" if any(c.status == "suspect" for c in self.corners) else "ok"

    def to_dataframe(self):
        """One row per corner as a pandas DataFrame (name, temperature_c, dc_loop_gain_db,
        unity_gain_hz, phase_margin_deg, gain_margin_db, status); needs pandas."""
        from amploop.corners.dataframes import corners_dataframe

        return corners_dataframe(self.corners)

    def to_frd(self) -> dict:
        """Corner name -> its loop gain as a python-control FRD (rad/s), for each corner
        with a loop gain; needs python-control."""
        from amploop.corners.dataframes import corners_frd

        return corners_frd(self.corners)

    def as_json(self) -> dict:
        """The content of results.json for this measurement."""
        from amploop.corners.stepcheck import with_step

        corners = []
        for c in self.corners:
            data = with_step(c.as_json(), self.step_checks.get(c.corner.name))
            data[JOURNAL_KEY] = self.keys.get(c.corner.name)
            corners.append(data)
        return {
            "schema": SCHEMA,
            "command": "measure",
            "job": self.job.name,
            "status": self.status,
            "values": dict(self.values),
            "corners": corners,
            "ac_analyses": {"run": self.ac_run, "reused": self.ac_reused},
            "transient_analyses": {"run": self.transient_run, "reused": self.transient_reused},
            "probe": self.job.analysis.probe,
            **loops_entry(self.job),
            "job_file": str(self.job.path),
            "seconds": self.seconds,
            "warnings": list(self.warnings),
            **statistics_entry(self.job, self.corners),
        }


def statistics_entry(job: Job, corners: tuple[CornerResult, ...]) -> dict:
    """results.json's ``statistics`` of ``job``, when it has ``[monte_carlo]``, over its
    samples among ``corners`` (:func:`~amploop.corners.samplestats.sample_statistics`); nothing without."""
    if job.monte_carlo is None:
        return {}
    from amploop.corners.samplestats import sample_statistics

    return {"statistics": [s.as_json() for s in sample_statistics(corners, job.target)]}


def loops_entry(job: Job) -> dict:
    """results.json's ``loops`` of a fully-differential ``job``: ``["differential"]``, with
    ``"common_mode"`` when that loop is measured; nothing for a single-ended job (whose
    results stay as they were)."""
    if not job.amplifier.fully_differential:
        return {}
    return {"loops": ["differential"] + (["common_mode"] if job.amplifier.common_mode_break
                                         else [])}


def _figures(margins: Margins | None) -> dict:
    """The figures of ``margins`` by results.json key, null for each when there are none."""
    figures = dict.fromkeys(("dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg",
                             "gain_margin_db", "phase_crossover_hz"))
    if margins is not None:
        figures.update(margins.as_dict())
    return figures


def assess_common_mode(response: FrequencyResponse) -> tuple[Margins, str | None]:
    """Margins of ``response``, a measured common-mode loop gain, and what makes them
    unusable (None: nothing). A loop gain that is negative at DC with |T| below 1 is what a break source
    written the wrong way round gives (about −6 dB): that is said."""
    from amploop.spice.units import engineering

    margins = loop_margins(response)
    dc_db, dc_phase = margins.dc_loop_gain_db, float(response.phase_deg[0])
    f0, f1 = response.frequency_hz[0], response.frequency_hz[-1]
    if abs(dc_phase) > 90.0:
        hint = ("; is the break source written the wrong way round? its first node must be "
                "the driving side" if dc_db < 0 else ": check the common-mode feedback's "
                "polarity")
        return margins, (f"the common-mode loop gain is negative at {engineering(f0, 'Hz')} "
                         f"(phase {dc_phase:.0f}°, |T| {dc_db:.1f} dB){hint}")
    if margins.unity_gain_hz is None:
        return margins, (f"the common-mode loop gain never crosses 0 dB between "
                         f"{engineering(f0, 'Hz')} and {engineering(f1, 'Hz')}")
    return margins, None


def assess_loop_gain(response: FrequencyResponse, op: OperatingPoint | None = None,
                     limits: OperatingPointLimits | None = None
                     ) -> tuple[Margins, str, str | None]:
    """Margins of a measured loop gain, the corner's status and the reason for it.

    A loop that is positive feedback at DC (phase near ±180° at the lowest frequency) or
    never crosses 0 dB within the sweep is an error; one whose margins exist but whose
    operating point ``op`` is broken, or whose DC loop gain is below the limit, is suspect
    (:func:`~amploop.bench.oppoint.corner_status`). The figures that exist are kept.

    Parameters
    ----------
    response
        The measured loop gain of one corner.
    op
        Its DC operating point (None: not read).
    limits
        The job's ``[operating_point]`` limits (None: the defaults).

    Returns
    -------
    margins, status, reason
        ``status`` is ``"ok"`` (``reason`` None), ``"suspect"`` or ``"error"``.
    """
    margins = loop_margins(response)
    status, reason = corner_status(response, margins, op, limits or OperatingPointLimits())
    return margins, status, reason


