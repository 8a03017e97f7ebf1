"""The ``map`` strategy: characterise each corner three times, solve on the maps, verify.

1. Simulate every corner at three branch impedances that differ in Cc (spread over the Cc
   bounds, at one Rc): three double-injection analyses per corner.
2. Build each corner's :class:`~amploop.analysis.compmap.CompensationMap` and solve the whole
   multi-corner problem on them (:func:`~.mapsolve.solve_on_maps`).
3. Simulate every corner at the chosen point. If a verified margin differs from the
   prediction by more than a tenth of the tolerance (an operating point that moved, a
   triode device, a parasitic the map does not hold), characterise again around the point
   and repeat, up to ``max_rounds``. The reported margins are always the verified ones.

With ``[target] objective = "settling"`` (or a ``settling_time`` ceiling) the
characterisations also run the closed-loop response, whose maps predict the small-signal
settling time at any point (:mod:`.settlemap`); the search minimises the worst corner's
(or holds the ceiling), and verification adds the step transient at every corner, whose
simulated settling times are the ones reported, beside the predictions.
"""

from __future__ import annotations

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.twomap import TwoElementMap, two_element_samples
from amploop.bench.branch import compensation_branch
from amploop.corners.stepcheck import run_step_checks, step_stop_s, step_window_s
from amploop.spec.limits import Target
from amploop.spice.units import describe_values, engineering
from amploop.strategy.common import Evaluator, Outcome, PointResult, bounds_of, not_simulated
from amploop.strategy.devicemap import tune_device_by_map
from amploop.strategy.mapgrid import CommonModeLoop
from amploop.strategy.mapsolve import MapSolution, round_on_maps, solve_on_maps
from amploop.strategy.portchar import characterise_ports, port_form
from amploop.strategy.samplerule import sample_rule
from amploop.strategy.samples import initial_samples, samples_around
from amploop.strategy.settlemap import SettlingLoop, settling_agreement
from amploop.strategy.worst import missed_settling, missed_target, settling_text, worst_text

__all__ = ["tune_by_map"]


def knob_values(point: dict[str, float], has_rc: bool) -> dict[str, float]:
    """A point on the map, ``{"cc", "rc"}``, as the values to simulate by role.

    Without an Rc to tune, the map's Rc coordinate is 0: Z = 1/(sCc), and whatever fixed Rc
    the netlist holds is part of the map's coefficients (Z_netlist = Rc_fixed + Z is affine
    in Z, so the loop gain stays bilinear in Z). Only Cc is then set in the netlist.
    """
    return dict(point) if has_rc else {"cc": point["cc"]}


def _maps(evaluator: Evaluator, results: list[PointResult], loop: str = "loop_gain"
          ) -> dict[str, CompensationMap]:
    """Each corner's map of its ``loop`` (the attribute of its results: the main loop's
    ``loop_gain``, or the ``common_mode_loop_gain``) from the samples ``results``: three
    for the one-impedance map, seven for the two-element one."""
    kind = TwoElementMap if len(results) == 7 else CompensationMap
    maps = {}
    for index, corner in enumerate(evaluator.corners):
        samples = [(p.values["cc"], p.values.get("rc", 0.0)) for p in results]
        responses = [getattr(p.corners[index], loop) for p in results]
        maps[corner.name] = kind.from_loop_gains(samples, responses)
    return maps


def map_form(evaluator: Evaluator) -> str:
    """``"two-element"`` when Rc is tuned and the node between Rc and Cc has other
    connections in the netlist (wiring, a bottom-plate capacitance: the loop gain is then
    bilinear in Rc and in 1/Cc separately, seven samples per corner), else
    ``"one-impedance"`` (bilinear in Z = Rc + 1/(sCc), three samples)."""
    if "rc" not in evaluator.amplifier.job.compensation:
        return "one-impedance"  # Cc alone is one element, whatever its node carries
    branch = compensation_branch(evaluator.amplifier)
    return branch.form if branch is not None else "one-impedance"


def _samples(form: str, cc_bounds, rc_bounds, rc_value: float) -> list[dict[str, float]]:
    """The first round's samples of the map of ``form``."""
    if form == "two-element":
        return two_element_samples(cc_bounds, rc_bounds, rc_value)
    return initial_samples(cc_bounds, rc_value)


def _samples_near(form: str, cc: float, rc: float, cc_bounds, rc_bounds
                  ) -> list[dict[str, float]]:
    """A later round's samples of the map of ``form``, around (``cc``, ``rc``)."""
    if form == "two-element":
        near_cc = (max(cc * 0.8, cc_bounds[0]), min(cc * 1.25, cc_bounds[1]))
        near_rc = (max(rc * 0.8, rc_bounds[0]), min(rc * 1.25, rc_bounds[1]))
        return two_element_samples(near_cc, near_rc, rc)
    return samples_around(cc, rc, cc_bounds)


def _common_mode(evaluator: Evaluator, results: list[PointResult], target: Target
                 ) -> CommonModeLoop | None:
    """The common-mode loop on its maps with its targets (a tenth of the tolerance above
    the phase margin, as for the main loop); None when it is not measured. With both
    halves' Cc (and Rc) set together it is bilinear in the branch impedance too."""
    if results[0].corners[0].common_mode_loop_gain is None:
        return None
    aim = target.common_mode_phase_margin_deg
    return CommonModeLoop(_maps(evaluator, results, "common_mode_loop_gain"),
                          None if aim is None else aim + 0.1 * target.tolerance_deg,
                          target.common_mode_gain_margin_db)


def _settling(evaluator: Evaluator, results: list[PointResult], target: Target
              ) -> SettlingLoop | None:
    """The closed loop on its maps with the settling objective and ceiling of ``target``;
    None when the target asks nothing of settling."""
    if not target.needs_settling:
        return None
    transient = evaluator.amplifier.job.transient
    return SettlingLoop(_maps(evaluator, results, "closed_loop"), transient.band,
                        transient.stop_s, minimise=target.objective == "settling",
                        ceiling_s=target.settling_time_s)


def _verify_settling(evaluator: Evaluator, settling: SettlingLoop, verified: PointResult,
                     point: dict[str, float]) -> tuple[dict, dict]:
    """The step checks at the verified point (every corner that measured), and per corner
    the predicted and simulated settling times over the same run."""
    ok = [c for c in verified.corners if c.status == "ok"]
    stop_s = step_stop_s(evaluator.amplifier, [c.margins.unity_gain_hz for c in ok])
    checks = run_step_checks(evaluator.amplifier, tuple(c.corner for c in ok), verified.values,
                             evaluator.runner, stop_s, evaluator.time_limit_s)
    predicted = settling.per_corner(point["cc"], point.get("rc", 0.0), 0.0,
                                    window_s=step_window_s(stop_s))
    simulated = {n: c.metrics and c.metrics.settling_s for n, c in checks.items()}
    return checks, settling_agreement(predicted, simulated)


def tune_by_map(evaluator: Evaluator, target: Target, *, max_rounds: int = 3) -> Outcome:
    """Run the map strategy; see the module docstring.

    With a MOSFET standing in for Rc, :func:`~.devicemap.tune_device_by_map` runs instead
    (with at least four rounds).

    Parameters
    ----------
    evaluator
        Simulates points at every corner of its job, within the job's bounds (a value
        without bounds stays at the netlist's).
    target
        The worst-corner phase margin to reach (aiming a tenth of the tolerance above it),
        the tolerance, and the minimum gain margin.
    max_rounds
        How many times at most to characterise, solve and verify.

    Returns
    -------
    Outcome
        ``converged`` with verified margins meeting the target; ``infeasible`` (verified)
        when no point within the bounds meets it; ``failed`` when corners do not simulate
        or verification keeps disagreeing with the maps.
    """
    if evaluator.amplifier.device is not None:

        return tune_device_by_map(evaluator, target, max_rounds=max(max_rounds, 4))
    knobs = evaluator.amplifier.job.compensation
    in_effect = evaluator.full_values({})
    has_rc = "rc" in knobs
    cc_bounds = bounds_of(knobs["cc"], in_effect["cc"])
    rc_now = in_effect.get("rc", 0.0) if has_rc else 0.0
    rc_bounds = bounds_of(knobs.get("rc"), rc_now)
    rc_sample = min(max(rc_now, rc_bounds[0]), rc_bounds[1])
    aim = target.phase_margin_deg + 0.1 * target.tolerance_deg
    agreement = target.tolerance_deg / 10.0

    rule = sample_rule(evaluator.corners, target, aim)  # a sigma or yield target's samples
    form = map_form(evaluator)
    # the settling objective's closed-loop maps come from the sampled path
    ports = None if target.needs_settling else port_form(
        evaluator, compensation_branch(evaluator.amplifier), form)
    samples = _samples(form, cc_bounds, rc_bounds, rc_sample)
    reference = initial_samples(cc_bounds, rc_sample)[1]
    solution: MapSolution | None = None
    verified: PointResult | None = None
    predictions = []
    for round_number in range(1, max_rounds + 1):
        if ports is not None:  # one analysis per corner, exact in either form
            point, maps = characterise_ports(
                evaluator, knob_values(reference, has_rc), ports,
                compensation_branch(evaluator.amplifier), note=f"round {round_number}")
            if point.errors:
                return not_simulated(point, in_effect)
            common_mode = settling = None
        else:
            characterised = evaluator.simulate([knob_values(p, has_rc) for p in samples],
                                               kind="characterise",
                                               note=f"round {round_number}",
                                               closed_loop=target.needs_settling)
            failed = next((p for p in characterised if p.errors), None)
            if failed is not None:
                return not_simulated(failed, in_effect)
            maps = _maps(evaluator, characterised)
            common_mode = _common_mode(evaluator, characterised, target)
            settling = _settling(evaluator, characterised, target)
        optimum = solve_on_maps(maps, cc_bounds, rc_bounds, aim, target.gain_margin_db,
                                common_mode=common_mode, rule=rule, settling=settling)
        # 4 significant digits, what a designer writes into the netlist and what is
        # verified, chosen on the maps so that rounding keeps every constraint met
        solution = round_on_maps(maps, optimum, cc_bounds, rc_bounds, aim, target.gain_margin_db,
                                 common_mode=common_mode, rule=rule, settling=settling)
        point = knob_values({"cc": solution.cc, "rc": solution.rc}, has_rc)
        verified = evaluator.simulate([point], kind="verify",
                                      note=f"round {round_number}")[0]
        predictions.append(solution)
        worst = verified.worst
        if worst is None:
            return not_simulated(verified)
        if abs(worst.phase_margin_deg - solution.phase_margin_deg) <= agreement:
            break
        samples = _samples_near(form, solution.cc, solution.rc, cc_bounds, rc_bounds)
        reference = {"cc": solution.cc, "rc": solution.rc}
    assert solution is not None and verified is not None
    worst = verified.worst
    extra = {"predicted": [p.__dict__ for p in predictions], "rounds": len(predictions),
             "map_form": form, "map_method": "samples" if ports is None else "ports"}
    if settling is not None and not verified.errors:
        # verification in the time domain: the step transients at every corner
        extra["step_checks"], extra["settling"] = _verify_settling(
            evaluator, settling, verified, {"cc": solution.cc, "rc": solution.rc})
    if not solution.feasible:
        if rule is not None:
            return Outcome("infeasible", verified.values, verified,
                           "no Cc, Rc within the bounds meets the statistical target; at the "
                           "best reachable point, " + (_statistical_miss(verified, target) or
                                                      "the samples meet it")
                           + " at " + describe_values(verified.values), extra)
        return Outcome("infeasible", verified.values, verified,
                       _unreachable(worst, target, extra.get("step_checks"))
                       + describe_values(verified.values), extra)
    if abs(worst.phase_margin_deg - solution.phase_margin_deg) > agreement:
        return Outcome(
            "failed", verified.values, verified,
            f"the maps and the simulation still disagree by "
            f"{abs(worst.phase_margin_deg - solution.phase_margin_deg):.2f}° after "
            f"{len(predictions)} rounds (does the operating point depend on Cc or Rc?)", extra,
        )
    if rule is not None:  # the samples against the rule, every other corner against the target
        missed = "; ".join(filter(None, (
            missed_target(tuple(c for c in verified.corners if c.corner.sample is None), target),
            _statistical_miss(verified, target)))) or None
    else:
        missed = missed_target(verified.corners, target)
    if missed is None and settling is not None:
        missed = missed_settling(extra["step_checks"], target)
    if missed is not None:
        return Outcome("failed", verified.values, verified, missed, extra)
    text = worst_text(worst, target) if rule is None else _statistical_text(verified, target)
    if settling is not None:
        text += settling_text(extra["step_checks"])
    return Outcome("converged", verified.values, verified,
                   f"{text} at " + describe_values(verified.values), extra)


def _statistical_miss(verified: PointResult, target: Target) -> str | None:
    from amploop.corners.samplestats import statistical_miss

    return statistical_miss(verified.corners, target)


def _statistical_text(verified: PointResult, target: Target) -> str:
    """The verified statistical figure of each base corner's samples, in words."""
    from amploop.corners.samplestats import sample_statistics

    parts = []
    for s in sample_statistics(verified.corners, target):
        if s.sigma is not None:
            parts.append(f"{s.group}: mean − {s.sigma:g}σ of the phase margin "
                         f"{s.pm_statistic_deg:.2f}°")
        else:
            parts.append(f"{s.group}: {s.meeting_target} of {s.samples} samples meet the "
                         f"target, yield ≥ {s.yield_interval_95[0]:.4f} (95 %)")
    return "; ".join(parts)


def _unreachable(worst, target: Target, checks: dict | None = None) -> str:
    """What no point within the bounds reaches, and the best that was reached (the start of
    an ``infeasible`` message, to be followed by the values): the settling ceiling when the
    margins are met and the step checks ``checks`` (corner name -> StepCheck) miss it, the
    common-mode loop's target when that is what the best point misses, else the main
    loop's."""
    missed = missed_settling(checks or {}, target)
    if missed is not None and worst.phase_margin_deg >= target.phase_margin_deg:
        ceiling = engineering(target.settling_time_s, "s")
        return (f"no Cc, Rc within the bounds meets the settling time {ceiling} "
                f"at every corner with the margins; at the point of least shortfall on the maps, "
                f"{missed.removeprefix('the ')} at ")
    cm = worst.common_mode
    cm_target = target.common_mode_phase_margin_deg
    if cm is not None and cm_target is not None and cm.phase_margin_deg < cm_target \
            and worst.phase_margin_deg >= target.phase_margin_deg:
        return (f"no Cc, Rc within the bounds meets the common-mode target {cm_target:g}° at "
                f"every corner: the best reachable worst-corner common-mode phase margin is "
                f"{cm.phase_margin_deg:.2f}° (corner {cm.phase_margin_corner}) at ")
    return (f"no Cc, Rc within the bounds meets {target.phase_margin_deg:g}° at every corner: "
            f"the best reachable worst-corner phase margin is {worst.phase_margin_deg:.2f}° "
            f"(corner {worst.phase_margin_corner}) at ")
