"""The ``map`` strategy when a MOSFET in triode stands in for Rc: tune (Cc, size).

The device carries no DC current, so the rest of the operating point does not move with
its size. Per round: read every corner's channel conductance g_ds at the current size from
ngspice's operating point (checking the device is in triode), characterise three Cc values
at that size, and solve on the maps in (Cc, size) with each corner's resistance scaled from
its own g_ds by the square law (R ∝ 1/W, 1/m or L). Verify by simulating the real device at
the chosen size; if the margins disagree with the prediction (the device's capacitances
move with its size), characterise again at the new size.
"""

from __future__ import annotations

import math

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.triode import in_triode, resistance_at_size, square_law_resistance
from amploop.errors import TuningError
from amploop.spec.limits import Target
from amploop.spice.units import describe_values, engineering
from amploop.strategy.common import Evaluator, Outcome, PointResult, bounds_of, not_simulated
from amploop.strategy.mapsolve import round_on_maps, solve_on_maps
from amploop.strategy.samples import initial_samples, samples_around
from amploop.strategy.worst import missed_target, worst_text

__all__ = ["device_json", "device_operating_points", "model_card", "tune_device_by_map"]


def model_card(evaluator: Evaluator, corner, model: str) -> dict[str, float]:
    """KP and VTO (and any other numeric parameter) of ``.model model`` for a corner, from
    the user's netlist or the corner's section of the models file; empty if not found.

    Parameters
    ----------
    evaluator
        Gives the prepared amplifier (its netlist files and the job's models file).
    corner
        The corner whose ``lib`` section of the models file is searched (the statements
        outside any section when it has none).
    model
        The model's name (case-insensitive).

    Returns
    -------
    dict
        Lower-case parameter name -> value, SI; parameters that do not evaluate to a
        number are left out.
    """
    from amploop.spice.expressions import evaluate
    from amploop.spice.source import read_source

    amplifier = evaluator.amplifier
    sources = list(amplifier.netlist.files.values())
    models = amplifier.job.amplifier.models
    wanted_section = corner.lib.lower() if corner.lib else None
    candidates = []
    for source in sources:
        candidates += [s for s in source.statements if s.section is None]
    if models is not None:
        models_source = read_source(models)
        candidates += [s for s in models_source.statements if s.section == wanted_section]
    for statement in candidates:
        if statement.keyword == ".model" and len(statement.tokens) > 2 and \
                statement.tokens[1].lower() == model.lower():
            params = {}
            for token in statement.tokens[3:]:
                key, eq, value = token.strip("()").partition("=")
                if eq:
                    try:
                        params[key.lower()] = evaluate(value.strip("()"))
                    except ValueError:
                        continue
            return params
    return {}


def device_operating_points(evaluator: Evaluator, values: dict[str, float]) -> dict[str, dict]:
    """g_ds, VGS, VDS, VDSAT of the device at every corner; TuningError if not in triode.

    Parameters
    ----------
    evaluator
        Runs the operating points at every corner; its amplifier's device stands in for Rc.
    values
        Compensation values by role, SI (``rc``: the device's size).

    Returns
    -------
    dict
        Corner name -> ``{"gds", "vgs", "vds", "vdsat"}`` (siemens, volts).
    """
    device = evaluator.amplifier.device
    found = evaluator.device_quantities(
        {q: device.quantity(q) for q in ("gds", "vgs", "vds", "vdsat")}, values)
    for corner in evaluator.corners:
        op = found[corner.name]
        if not in_triode(op["vgs"], op["vds"], op["vdsat"]) or op["gds"] <= 0:
            raise TuningError(
                f"{device.name} is not in triode at corner {corner.name}: "
                f"VDS = {op['vds']:.3g} V, VGS = {op['vgs']:.3g} V, "
                f"VT = {op['vgs'] - op['vdsat']:.3g} V",
                file=evaluator.amplifier.job.path, place="[compensation].rc",
                hint="bias its gate further beyond the threshold",
            )
    return found


def tune_device_by_map(evaluator: Evaluator, target: Target, *, max_rounds: int = 4) -> Outcome:
    """Tune Cc and the device size; see the module docstring.

    Parameters
    ----------
    evaluator
        Simulates points at every corner of its job, within the job's bounds; its
        amplifier has a device standing in for Rc.
    target
        The worst-corner phase margin to reach (aiming a tenth of the tolerance above it),
        the tolerance, and the minimum gain margin.
    max_rounds
        How many times at most to read the operating points, characterise, solve and
        verify.

    Returns
    -------
    Outcome
        As for :func:`~.mapping.tune_by_map`; ``extra["device"]`` holds the device's
        figures per corner.
    """
    amplifier = evaluator.amplifier
    device = amplifier.device
    knobs = amplifier.job.compensation
    in_effect = evaluator.full_values({})
    cc_bounds = bounds_of(knobs["cc"], in_effect["cc"])
    size_bounds = bounds_of(knobs["rc"], in_effect["rc"])
    size, start_note = _starting_size(evaluator, in_effect, size_bounds)
    aim = target.phase_margin_deg + 0.1 * target.tolerance_deg
    agreement = target.tolerance_deg / 10.0
    samples = initial_samples(cc_bounds, size)
    verified: PointResult | None = None
    solution = None
    rounds = []
    for round_number in range(1, max_rounds + 1):
        ops = device_operating_points(evaluator, {"cc": samples[1]["cc"], "rc": size})
        resistance = {name: 1.0 / op["gds"] for name, op in ops.items()}
        characterised = evaluator.simulate(samples, kind="characterise",
                                           note=f"round {round_number}, {device.name} "
                                           f"{device.size} = {engineering(size, 'm')}")
        failed = next((p for p in characterised if p.errors), None)
        if failed is not None:
            return not_simulated(failed, in_effect)
        maps, rc_of = {}, {}
        for index, corner in enumerate(evaluator.corners):
            points = [(p.values["cc"], resistance[corner.name]) for p in characterised]
            maps[corner.name] = CompensationMap.from_loop_gains(
                points, [p.corners[index].loop_gain for p in characterised])
            rc_of[corner.name] = (lambda s, r=resistance[corner.name], s0=size:
                                  resistance_at_size(r, s0, s, device.size))
        optimum = solve_on_maps(maps, cc_bounds, size_bounds, aim, target.gain_margin_db,
                                rc_of=rc_of)
        solution = round_on_maps(maps, optimum, cc_bounds, size_bounds, aim,
                                 target.gain_margin_db, rc_of=rc_of)
        point = {"cc": solution.cc, "rc": solution.rc}
        verified = evaluator.simulate([point], kind="verify", note=f"round {round_number}")[0]
        rounds.append({"size": size, "resistance_ohm": resistance,
                       "predicted_pm_deg": solution.phase_margin_deg})
        worst = verified.worst
        if worst is None:
            return not_simulated(verified)
        if abs(worst.phase_margin_deg - solution.phase_margin_deg) <= agreement:
            break
        size = point["rc"]
        samples = samples_around(point["cc"], size, cc_bounds)
    worst = verified.worst
    report = _device_report(evaluator, verified, maps, target, cc_bounds, size_bounds)
    report["sample_resistance_ohm"] = rounds[-1]["resistance_ohm"]
    report["start"] = start_note
    extra = {"rounds": rounds, "device": report}
    values_text = describe_values(verified.values, (device.name, device.size))
    if not solution.feasible:
        return Outcome("infeasible", verified.values, verified,
                       f"no Cc and {device.name} size within the bounds meets "
                       f"{target.phase_margin_deg:g}° at every corner: the best reachable "
                       f"worst-corner phase margin is {worst.phase_margin_deg:.2f}° (corner "
                       f"{worst.phase_margin_corner}) at {values_text}", extra)
    if abs(worst.phase_margin_deg - solution.phase_margin_deg) > agreement:
        return Outcome("failed", verified.values, verified,
                       f"the maps and the simulation still disagree by "
                       f"{abs(worst.phase_margin_deg - solution.phase_margin_deg):.2f}° after "
                       f"{len(rounds)} rounds", extra)
    missed = missed_target(verified.corners, target)
    if missed is not None:
        return Outcome("failed", verified.values, verified, missed, extra)
    return Outcome("converged", verified.values, verified,
                   f"{worst_text(worst, target)} at {values_text}", extra)


def _starting_size(evaluator: Evaluator, in_effect: dict[str, float],
                   size_bounds: tuple[float, float]) -> tuple[float, dict]:
    """The first size to characterise at, from the square law.

    Aim: R_on = 1/gm2 of the second-stage driver (the value that cancels the right-half-
    plane zero) at the first corner, with KP and VTO from the device's model card and VGS
    from the operating point: W = L/(KP·R·(VGS − VTO)). Without a card that gives KP and
    VTO, or without ``second_stage_device``, the netlist's size (kept within the bounds).
    """
    amplifier = evaluator.amplifier
    device = amplifier.device
    netlist_size = min(max(in_effect["rc"], size_bounds[0]), size_bounds[1])
    first = evaluator.corners[0]
    card = model_card(evaluator, first, device.model)
    second = amplifier.job.amplifier.second_stage_device
    if not ("kp" in card and "vto" in card and second and device.size == "w" and device.length):
        return netlist_size, {"size": netlist_size, "from": "netlist"}
    quantities = evaluator.device_quantities(
        {"vgs": device.quantity("vgs"), "gm2": f"@m.x1.{second.lower()}[gm]"},
        {"cc": in_effect["cc"], "rc": netlist_size})[first.name]
    vov = abs(quantities["vgs"]) - abs(card["vto"])
    if vov <= 0 or quantities["gm2"] <= 0:
        return netlist_size, {"size": netlist_size, "from": "netlist"}
    r_target = 1.0 / quantities["gm2"]
    width = device.length / (card["kp"] * r_target * vov)
    width = min(max(float(f"{width:.4g}"), size_bounds[0]), size_bounds[1])
    return width, {"size": width, "from": "square law", "target_ohm": r_target,
                   "corner": first.name, "kp": card["kp"], "vto": card["vto"],
                   "vgs": quantities["vgs"]}


def _device_report(evaluator: Evaluator, verified: PointResult, maps, target: Target,
                   cc_bounds, size_bounds) -> dict:
    """Per corner at the final size: the simulator's resistance, the square law's, and the Rc
    that corner alone would have wanted at the chosen Cc."""
    device = evaluator.amplifier.device
    values = verified.values
    ops = device_operating_points(evaluator, values)
    corners = {}
    aim = target.phase_margin_deg + 0.1 * target.tolerance_deg
    for corner in evaluator.corners:
        op = ops[corner.name]
        resistance = 1.0 / op["gds"]
        card = model_card(evaluator, corner, device.model)
        square = None
        if "kp" in card and "vto" in card and device.length:
            w = values["rc"] if device.size == "w" else None
            if w is not None:
                square = square_law_resistance(card["kp"], w, device.length,
                                               abs(op["vgs"]) - abs(card["vto"]))
        low = float(resistance_at_size(resistance, values["rc"], size_bounds[1], device.size))
        high = float(resistance_at_size(resistance, values["rc"], size_bounds[0], device.size))
        low, high = min(low, high), max(low, high)
        alone = solve_on_maps({corner.name: maps[corner.name]}, (values["cc"], values["cc"]),
                              (low, high), aim, target.gain_margin_db)
        corners[corner.name] = {
            "resistance_ohm": resistance,
            "square_law_ohm": None if square is None or not math.isfinite(square) else square,
            "wanted_rc_ohm": alone.rc if alone.feasible else None,
            "vgs": op["vgs"], "vds": op["vds"], "vt": op["vgs"] - op["vdsat"],
        }
    return {"name": device.name, "size": device.size, "value": values["rc"],
            "model": device.model, "corners": corners}


def device_json(report: dict | None) -> dict | None:
    """The device ``report`` (``extra["device"]`` of :func:`tune_device_by_map`) as
    results.json holds it: ``corners`` a list of records with the corner's ``name``, each
    with its ``sample_resistance_ohm`` (the resistance of the last characterisation
    samples); None for None."""
    if report is None:
        return None
    data = {k: v for k, v in report.items() if k not in ("corners", "sample_resistance_ohm")}
    samples = report.get("sample_resistance_ohm", {})
    data["corners"] = [{"name": name, **info, "sample_resistance_ohm": samples.get(name)}
                       for name, info in report["corners"].items()]
    return data

