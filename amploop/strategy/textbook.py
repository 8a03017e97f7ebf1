"""The ``textbook`` strategy: the published two-step procedure, kept as a baseline.

1. Start: Cc = β·gm1·CL,eff/gm2 with gm1, gm2 read from ngspice's operating point of the
   devices named in ``[amplifier]`` (largest over the corners), Rc at its lower bound.
2. Dominant-pole step: aim for PMdp = target − lead share. At the frequency where the loop
   phase is −(180° − PMdp), read |L| and scale Cc by it (the crossover moves there); the
   worst corner (largest |L|) sets the factor.
3. Lead step: put the zero at k·ωt, k = 1/tan(lead share), with
   Rc = 1/gm2 + 1/(k·ωt·Cc), which also cancels the right-half-plane zero; the corner with
   the smallest phase margin supplies gm2 and ωt.
4. Then move Cc with Rc fixed until the worst corner lands in [target, target + tolerance]
   (secant steps on phase margin against log Cc, bisection once bracketed).

Every step simulates every corner.
"""

from __future__ import annotations

import math

from amploop.analysis.twostage import (
    effective_load,
    feedback_factor,
    lead_ratio,
    lead_resistor,
    starting_cc,
    where_phase_is,
)
from amploop.errors import TuningError
from amploop.spec.limits import Target
from amploop.spice.units import describe_values, parse_value
from amploop.strategy.common import (
    Evaluator,
    Outcome,
    PointResult,
    bounds_of,
    gm_quantity,
    not_simulated,
)
from amploop.strategy.worst import meets_target, missed_target, worst_text

__all__ = ["tune_by_textbook"]


def _corner_value(expression: str, params: dict[str, float]) -> float:
    from amploop.spice.expressions import evaluate

    try:
        return parse_value(expression)
    except ValueError:
        return evaluate(expression, {k: repr(v) for k, v in params.items()})


def _clip(value: float, bounds: tuple[float, float]) -> float:
    return min(max(value, bounds[0]), bounds[1])


def tune_by_textbook(evaluator: Evaluator, target: Target, *, lead_share_deg: float = 25.0,
                     max_cc_steps: int = 12) -> Outcome:
    """Run the textbook procedure; see the module docstring.

    Parameters
    ----------
    evaluator
        Simulates points at every corner of its job, within the job's bounds; the job
        names ``input_device`` and ``second_stage_device``.
    target
        The worst-corner phase margin to reach, the tolerance above it, and the minimum
        gain margin.
    lead_share_deg
        The lead zero's share of the phase margin, degrees: the dominant-pole step aims at
        the target less this, and the zero goes to k·ωt with k = 1/tan(this).
    max_cc_steps
        How many times at most Cc is moved with Rc fixed at the end.

    Returns
    -------
    Outcome
        ``converged`` when the last point meets the target, else ``failed`` (never
        ``infeasible``: the procedure cannot prove that nothing works).

    Raises
    ------
    TuningError
        Without ``input_device`` and ``second_stage_device``, or with a MOSFET standing
        in for Rc.
    """
    _check_applies(evaluator)
    job = evaluator.amplifier.job
    in_effect = evaluator.full_values({})
    point = _Clipped(bounds_of(job.compensation["cc"], in_effect["cc"]),
                     bounds_of(job.compensation.get("rc"), in_effect.get("rc", 0.0))
                     if "rc" in in_effect else None)
    amp = job.amplifier
    gms = evaluator.device_quantities(
        {"gm1": gm_quantity(amp.input_device), "gm2": gm_quantity(amp.second_stage_device)},
        in_effect)
    rc = point.rc_bounds[0] if point.rc_bounds else 0.0
    current = evaluator.simulate([point(max(_starting_ccs(evaluator, gms)), rc)], kind="start",
                                 note="Cc = β·gm1·CL,eff/gm2")[0]
    if failed := _failure(current):
        return failed

    # dominant-pole step: Cc scaled so that |L| = 1 where the phase leaves the target less
    # the lead zero's share
    pm_dp = target.phase_margin_deg - lead_share_deg
    scale = _dominant_pole_scale(current, pm_dp)
    current = evaluator.simulate([point(current.values["cc"] * scale, rc)], kind="dominant-pole",
                                 note=f"|L| at −{180 - pm_dp:g}°: ×{scale:.3g}")[0]
    if failed := _failure(current):
        return failed

    if point.rc_bounds:  # lead step: the zero at k·ωt of the worst corner
        worst = min(current.corners, key=lambda c: c.margins.phase_margin_deg)
        omega_t = 2 * math.pi * worst.margins.unity_gain_hz
        k = lead_ratio(lead_share_deg)
        rc = lead_resistor(gms[worst.corner.name]["gm2"], k, omega_t, current.values["cc"])
        current = evaluator.simulate([point(current.values["cc"], rc)], kind="lead",
                                     note=f"zero at {k:.2f}·ωt of {worst.corner.name}")[0]
        if failed := _failure(current):
            return failed
        rc = current.values["rc"]

    current = _adjust_cc(evaluator, target, current, point, rc, max_cc_steps)
    if isinstance(current, Outcome):
        return current
    return _ending(current, target)


def _check_applies(evaluator: Evaluator) -> None:
    """Refuse a job the procedure cannot run on (no gm to read, a user's testbench without
    its beta and load, or a device for Rc)."""
    job = evaluator.amplifier.job
    if not job.amplifier.input_device or not job.amplifier.second_stage_device:
        raise TuningError(
            "the textbook strategy needs [amplifier].input_device and second_stage_device "
            "(an input-pair transistor and the second-stage driver) to read their gm",
            file=job.path, place="[amplifier]",
        )
    given = job.testbench
    if given is not None and (given.beta is None or given.load_f is None):
        raise TuningError("with your own testbench the textbook strategy needs its feedback "
                          "factor and the output's load: give [testbench] beta and load "
                          "(amploop does not read them off the deck)", file=job.path,
                          place="[testbench]")
    if evaluator.amplifier.device is not None:
        raise TuningError("the textbook strategy sets a resistance, not a device size: use the "
                          "map strategy for a MOSFET standing in for Rc",
                          file=job.path, place="[compensation].rc")


class _Clipped:
    """A point of the walk, its values clipped to the bounds (farads; ohms)."""

    def __init__(self, cc_bounds: tuple[float, float],
                 rc_bounds: tuple[float, float] | None) -> None:
        self.cc_bounds, self.rc_bounds = cc_bounds, rc_bounds

    def __call__(self, cc: float, rc: float) -> dict[str, float]:
        values = {"cc": _clip(cc, self.cc_bounds)}
        if self.rc_bounds:
            values["rc"] = _clip(rc, self.rc_bounds)
        return values


def _starting_ccs(evaluator: Evaluator, gms: dict) -> list[float]:
    """Each corner's starting Cc, farads: β·gm1·CL,eff/gm2 with its configuration's
    feedback network at that corner and the gm read from the simulator there."""
    job = evaluator.amplifier.job
    starts = []
    for corner in evaluator.corners:
        fb = job.feedback_for(corner)
        if fb is None:  # the user's own testbench: its beta and load as the job gives them
            given = job.testbench
            starts.append(starting_cc(given.beta, gms[corner.name]["gm1"], given.load_f,
                                      gms[corner.name]["gm2"]))
            continue
        z_in = _corner_value(fb.input, corner.params)
        z_fb = _corner_value(fb.feedback, corner.params)
        cl = _corner_value(fb.load, corner.params)
        c_input = _corner_value(fb.input_load, corner.params)
        beta = feedback_factor(fb.kind, z_in, z_fb, c_input)
        cl_eff = effective_load(fb.kind, cl, z_in, z_fb, c_input)
        starts.append(starting_cc(beta, gms[corner.name]["gm1"], cl_eff, gms[corner.name]["gm2"]))
    return starts


def _dominant_pole_scale(current: PointResult, pm_dp: float) -> float:
    """How much to scale Cc by so that every corner's |L| falls to 1 by the frequency where
    its phase reaches −(180 − ``pm_dp``)° (``pm_dp`` in degrees): the largest |L| there
    (1 when no corner reaches that phase)."""
    factors = [found[1] for c in current.corners
               if (found := where_phase_is(c.loop_gain, -(180.0 - pm_dp))) is not None]
    return max(factors) if factors else 1.0


def _adjust_cc(evaluator: Evaluator, target: Target, current: PointResult, point: _Clipped,
               rc: float, max_cc_steps: int) -> PointResult | Outcome:
    """Move Cc with Rc fixed until the worst corner lands in the target window: bold steps
    (about 1° per 2 % of Cc near the target on a two-stage loop) until the window is
    bracketed, then interpolation in log Cc. The last point, or the Outcome of a point
    that could not be simulated."""
    low, high = None, None  # (log cc, pm) below / above the window
    for _ in range(max_cc_steps):
        worst = current.worst
        pm = worst.phase_margin_deg
        log_cc = math.log(current.values["cc"])
        if target.phase_margin_deg <= pm <= target.phase_margin_deg + target.tolerance_deg \
                and meets_target(worst, target):
            break
        if pm < target.phase_margin_deg or not meets_target(worst, target):
            low = (log_cc, pm)
        else:
            high = (log_cc, pm)
        aim = target.phase_margin_deg + 0.4 * target.tolerance_deg
        if low and high:
            t = (aim - low[1]) / (high[1] - low[1]) if high[1] != low[1] else 0.5
            next_log = low[0] + min(max(t, 0.1), 0.9) * (high[0] - low[0])
        else:
            next_log = log_cc + max(min((aim - pm) * 0.02, 0.7), -0.7)
        next_cc = _clip(math.exp(next_log), point.cc_bounds)
        if math.isclose(next_cc, current.values["cc"], rel_tol=1e-9):
            break  # against a bound
        current = evaluator.simulate([point(next_cc, rc)], kind="adjust-cc",
                                     note="Cc with Rc fixed")[0]
        if failed := _failure(current):
            return failed
    return current


def _ending(current: PointResult, target: Target) -> Outcome:
    """Converged when the last point meets the target; else failed (the procedure cannot
    prove that nothing works, so never "infeasible")."""
    worst = current.worst
    missed = missed_target(current.corners, target)
    if missed is None:
        return Outcome("converged", current.values, current,
                       f"{worst_text(worst, target)} at " + describe_values(current.values))
    return Outcome("failed", current.values, current,
                   "the textbook procedure ends at " + describe_values(current.values)
                   + f": {missed}")


def _failure(point: PointResult) -> Outcome | None:
    return not_simulated(point) if point.worst is None else None
