"""A general-purpose optimiser driving simulations, for the benchmark only.

scipy's COBYLA (constrained optimisation by linear approximation) maximises the
worst-corner unity-gain frequency subject to worst-corner phase margin ≥ target and gain
margin ≥ minimum, in the variables (log Cc, Rc/Rc,max), every evaluation simulating
every corner. It shows side by side what the compensation map saves; it is not offered
on the command line.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.optimize import minimize

from amploop.spec.limits import Target
from amploop.spice.units import describe_values
from amploop.strategy.common import Evaluator, Outcome, bounds_of
from amploop.strategy.worst import meets_target, missed_target, worst_text

__all__ = ["tune_by_optimizer"]


def tune_by_optimizer(evaluator: Evaluator, target: Target, *, max_evaluations: int = 60
                      ) -> Outcome:
    """Run COBYLA from the netlist's values (clipped into the bounds).

    Parameters
    ----------
    evaluator
        Simulates points at every corner of its job, within the job's bounds.
    target
        The worst-corner phase margin and the minimum gain margin to reach.
    max_evaluations
        COBYLA's iteration limit (``maxiter``); a point it tries again is not simulated
        again.
    """
    knobs = evaluator.amplifier.job.compensation
    in_effect = evaluator.full_values({})
    cc_lo, cc_hi = bounds_of(knobs["cc"], in_effect["cc"])
    has_rc = "rc" in in_effect
    rc_lo, rc_hi = bounds_of(knobs.get("rc"), in_effect.get("rc", 0.0))
    rc_scale = max(rc_hi, 1.0)
    cache: dict[tuple, object] = {}

    def values_of(x: np.ndarray) -> dict[str, float]:
        cc = float(np.clip(math.exp(x[0]), cc_lo, cc_hi))
        values = {"cc": float(f"{cc:.6g}")}
        if has_rc:
            values["rc"] = float(f"{float(np.clip(x[1] * rc_scale, rc_lo, rc_hi)):.6g}")
        return values

    def evaluate(x: np.ndarray):
        values = values_of(x)
        key = tuple(sorted(values.items()))
        if key not in cache:
            cache[key] = evaluator.simulate([values], kind="evaluate")[0]
        return cache[key]

    def objective(x):
        worst = evaluate(x).worst
        return 0.0 if worst is None else -math.log(max(worst.unity_gain_hz, 1.0))

    def pm_constraint(x):
        worst = evaluate(x).worst
        return -90.0 if worst is None else worst.phase_margin_deg - target.phase_margin_deg

    def gm_constraint(x):
        worst = evaluate(x).worst
        if worst is None:
            return -90.0
        if target.gain_margin_db is None or worst.gain_margin_db is None:
            return 10.0
        return worst.gain_margin_db - target.gain_margin_db

    def cm_pm_constraint(x):  # a fully-differential amplifier's common-mode loop
        worst = evaluate(x).worst
        if worst is None:
            return -90.0
        if worst.common_mode is None or target.common_mode_phase_margin_deg is None:
            return 10.0
        return worst.common_mode.phase_margin_deg - target.common_mode_phase_margin_deg

    constraints = [{"type": "ineq", "fun": pm_constraint}, {"type": "ineq", "fun": gm_constraint},
                   {"type": "ineq", "fun": cm_pm_constraint},
                   {"type": "ineq", "fun": lambda x: x[0] - math.log(cc_lo)},
                   {"type": "ineq", "fun": lambda x: math.log(cc_hi) - x[0]}]
    x0 = [math.log(min(max(in_effect["cc"], cc_lo), cc_hi))]
    if has_rc:
        x0.append(min(max(in_effect["rc"], rc_lo), rc_hi) / rc_scale)
        constraints += [{"type": "ineq", "fun": lambda x: x[1] - rc_lo / rc_scale},
                        {"type": "ineq", "fun": lambda x: rc_hi / rc_scale - x[1]}]
    minimize(objective, np.array(x0), method="COBYLA", constraints=constraints,
             options={"maxiter": max_evaluations, "rhobeg": 0.5, "catol": 0.0})
    feasible = [p for p in cache.values() if meets_target(p.worst, target)]
    if not feasible:
        best = max(cache.values(), key=lambda p: p.worst.phase_margin_deg if p.worst else -1e9)
        missed = missed_target(best.corners, target) or "a corner did not measure"
        return Outcome("failed", best.values, best,
                       "the optimiser found no point meeting the target; at its best, "
                       + describe_values(best.values) + f", {missed}")
    best = max(feasible, key=lambda p: p.worst.unity_gain_hz)
    return Outcome("converged", best.values, best,
                   f"{worst_text(best.worst, target)} at " + describe_values(best.values))
