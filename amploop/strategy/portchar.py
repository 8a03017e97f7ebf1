"""The map strategy's characterisation at the compensation's ports: one analysis per
corner (the probe's two runs and one run per port, in one loaded circuit) gives that
corner's exact map at every (Cc, Rc) (:mod:`amploop.analysis.portmap`), in the
one-impedance and the two-element case alike."""

from __future__ import annotations

from amploop.analysis.portmap import PortMap
from amploop.bench.branch import CompensationBranch
from amploop.bench.portbench import PortCharacterisation, port_ports
from amploop.bench.requests import AnalysisOutput
from amploop.bench.testbench import build_testbench
from amploop.corners.measure import result_from_output
from amploop.strategy.common import Evaluator, PointResult

__all__ = ["characterise_ports", "port_form"]


def port_form(evaluator: Evaluator, branch: CompensationBranch | None, form: str
              ) -> str | None:
    """The port map's form for the map strategy's ``form`` in ``evaluator``'s job, with
    the compensation ``branch``; None where ports cannot be used (no branch of named
    elements, another probe than double injection)."""
    job = evaluator.amplifier.job
    if branch is None or job.analysis.probe != "double-injection":
        return None
    if "rc" not in job.compensation:
        return "cc-only"
    if branch.middle is None:  # not one series branch: a port per element holds any case
        return "two-element"
    return form


def characterise_ports(evaluator: Evaluator, values: dict[str, float], form: str,
                       branch: CompensationBranch, note: str
                       ) -> tuple[PointResult, dict[str, PortMap]]:
    """Characterise every corner at the reference ``values`` (by role, SI).

    Parameters
    ----------
    evaluator
        Runs the analyses (journalled) and records the reference point in its history
        (kind ``"characterise-ports"``).
    values
        The reference compensation values.
    form
        The port map's form (:func:`port_form`).
    branch
        Where Rc and Cc sit in the netlist.
    note
        Recorded with the history entry.

    Returns
    -------
    point, maps
        The reference point simulated at every corner, and each corner's map (a corner
        whose analysis failed has none).
    """
    amplifier = evaluator.amplifier
    values = evaluator.full_values(values)
    ports = tuple(port_ports(branch, form, amplifier))
    chars, items = {}, []
    for corner in evaluator.corners:
        label = f"{corner.name} @ " + " ".join(f"{k}={v:.4g}" for k, v in values.items())
        bench = build_testbench(amplifier, corner, values, label=label)
        chars[corner.name] = PortCharacterisation(bench, form, ports)
        items.append((corner.name, chars[corner.name].request(amplifier,
                                                              evaluator.time_limit_s)))
    results, maps = {}, {}
    for name, output, _ in evaluator.runner.run(items):
        char = chars[name]
        if isinstance(output, AnalysisOutput):
            results[name] = result_from_output(char.bench, char.bench_output(output), amplifier)
            maps[name] = char.port_map(amplifier, output)
        else:
            results[name] = result_from_output(char.bench, output, amplifier)
    point = PointResult(values=values, corners=tuple(results[c.name] for c in evaluator.corners))
    keys = {name: evaluator.runner.key_of(request) for name, request in items}
    evaluator.record(point, "characterise-ports", note, keys, evaluator.ac_analyses)
    return point, maps
