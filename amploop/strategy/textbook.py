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
from amploop.spec.model import Target
from amploop.spice.units import describe_values, parse_value
from amploop.strategy.common import (
    Evaluator,
    Outcome,
    PointResult,
    bounds_of,
    gm_quantity,
    meets_target,
    missed_target,
    not_simulated,
)

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
    amp = evaluator.amplifier.job.amplifier
    if not amp.input_device or not amp.second_stage_device:
        raise TuningError(
            "the textbook strategy needs [amplifier].input_device and second_stage_device "
            "(an input-pair transistor and the second-stage driver) to read their gm",
            file=evaluator.amplifier.job.path, place="[amplifier]",
        )
    job = evaluator.amplifier.job
    if evaluator.amplifier.device is not None:
        raise TuningError("the textbook strategy sets a resistance, not a device size: use the "
                          "map strategy for a MOSFET standing in for Rc",
                          file=job.path, place="[compensation].rc")
    knobs = job.compensation
    in_effect = evaluator.full_values({})
    cc_bounds = bounds_of(knobs["cc"], in_effect["cc"])
    has_rc = "rc" in in_effect
    rc_bounds = bounds_of(knobs.get("rc"), in_effect.get("rc", 0.0))

    gms = evaluator.device_quantities(
        {"gm1": gm_quantity(amp.input_device), "gm2": gm_quantity(amp.second_stage_device)},
        in_effect)
    fb = job.feedback
    starts = []
    for corner in evaluator.corners:
        z_in = _corner_value(fb.input, corner.params)
        z_fb = _corner_value(fb.feedback, corner.params)
        cl = _corner_value(fb.load, corner.params)
        beta = feedback_factor(fb.kind, z_in, z_fb)
        cl_eff = effective_load(fb.kind, cl, z_in, z_fb)
        starts.append(starting_cc(beta, gms[corner.name]["gm1"], cl_eff, gms[corner.name]["gm2"]))

    def point(cc: float, rc: float) -> dict[str, float]:
        values = {"cc": _clip(cc, cc_bounds)}
        if has_rc:
            values["rc"] = _clip(rc, rc_bounds)
        return values

    rc = rc_bounds[0]
    current = evaluator.simulate([point(max(starts), rc)], kind="start",
                                 note="Cc = β·gm1·CL,eff/gm2")[0]
    failed = _failure(current)
    if failed:
        return failed

    # dominant-pole step
    pm_dp = target.phase_margin_deg - lead_share_deg
    factors = []
    for c in current.corners:
        found = where_phase_is(c.loop_gain, -(180.0 - pm_dp))
        if found is not None:
            factors.append(found[1])
    scale = max(factors) if factors else 1.0
    current = evaluator.simulate([point(current.values["cc"] * scale, rc)], kind="dominant-pole",
                                 note=f"|L| at −{180 - pm_dp:g}°: ×{scale:.3g}")[0]
    failed = _failure(current)
    if failed:
        return failed

    # lead step
    if has_rc:
        worst = min(current.corners, key=lambda c: c.margins.phase_margin_deg)
        omega_t = 2 * math.pi * worst.margins.unity_gain_hz
        k = lead_ratio(lead_share_deg)
        rc = lead_resistor(gms[worst.corner.name]["gm2"], k, omega_t, current.values["cc"])
        current = evaluator.simulate([point(current.values["cc"], rc)], kind="lead",
                                     note=f"zero at {k:.2f}·ωt of {worst.corner.name}")[0]
        failed = _failure(current)
        if failed:
            return failed
        rc = current.values["rc"]

    # move Cc with Rc fixed until the worst corner lands in the target window
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
            t = min(max(t, 0.1), 0.9)
            next_log = low[0] + t * (high[0] - low[0])
        else:
            # about 1° per 2 % of Cc near the target on a two-stage loop; step boldly
            step = max(min((aim - pm) * 0.02, 0.7), -0.7)
            next_log = log_cc + step
        next_cc = _clip(math.exp(next_log), cc_bounds)
        if math.isclose(next_cc, current.values["cc"], rel_tol=1e-9):
            break  # against a bound
        current = evaluator.simulate([point(next_cc, rc)], kind="adjust-cc",
                                     note="Cc with Rc fixed")[0]
        failed = _failure(current)
        if failed:
            return failed
    worst = current.worst
    missed = missed_target(current.corners, target)
    if missed is None:
        return Outcome("converged", current.values, current,
                       f"worst-corner phase margin {worst.phase_margin_deg:.2f}° "
                       f"(corner {worst.limiting_corner}) at " + describe_values(current.values))
    # the procedure cannot prove that nothing works, so this is a failure, not "infeasible"
    return Outcome("failed", current.values, current,
                   "the textbook procedure ends at " + describe_values(current.values)
                   + f": {missed}")


def _failure(point: PointResult) -> Outcome | None:
    return not_simulated(point) if point.worst is None else None
