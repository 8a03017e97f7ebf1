"""Remarks on a tuned point that are not failures: a value at or near one of its bounds,
a lead zero below the unity-gain frequency, a settling prediction the step transient does
not confirm.

The bound remark and the zero's placement are pure functions; :func:`second_stage_gm`
reads the second-stage transconductance from ngspice's operating point through the
evaluator (journalled, and the same analysis the textbook strategy runs).
"""

from __future__ import annotations

import math

from amploop.analysis.twostage import rhp_zero_rad_s
from amploop.corners.results import CornerResult
from amploop.errors import SimulatorError
from amploop.spec.model import Knob
from amploop.spice.units import engineering
from amploop.strategy.common import Evaluator, gm_quantity

__all__ = ["NEAR_BOUND", "SETTLING_AGREEMENT", "bound_remark", "lead_zero_remark", "mismatch_remark",
           "second_stage_gm", "settling_remark"]

#: Predicted and simulated settling times further apart than this share get a remark.
SETTLING_AGREEMENT = 0.05

#: A value within this share of a bound counts as near it (19.9 kΩ against 20 kΩ: 0.5 %).
NEAR_BOUND = 0.02


def _label(knob: Knob) -> tuple[str, str]:
    """(name for people, unit) of a compensation value."""
    if knob.where == "device":
        return f"{knob.name} {knob.size}", "" if knob.size == "m" else "m"
    return ("Cc", "F") if knob.role == "cc" else ("Rc", "Ω")


def bound_remark(values: dict[str, float], knobs: dict[str, Knob],
                 near: float = NEAR_BOUND, objective: str = "bandwidth") -> str:
    """A note for values on or within ``near`` (relative) of a bound, or "".

    A value pressed against a bound is where the search stopped, not where the circuit
    wanted to be: a wider bound may give more bandwidth (faster settling, under the
    settling objective). A lower bound of 0 is left out (Rc = 0 is the branch without a
    resistor, not a limit of the search).

    Parameters
    ----------
    values
        The chosen values by role, SI.
    knobs
        The job's ``[compensation]`` entries by role, with their bounds (SI).
    near
        How close, relative to the bound, counts as near it.
    objective
        The target's objective (``"bandwidth"`` or ``"settling"``): what a wider bound may
        give.

    Returns
    -------
    str
        ``" (Rc = 19.9 kΩ is within 0.5 % of its upper bound 20 kΩ: a wider bound may
        give more bandwidth)"``, or "" when no value is near a bound.
    """
    notes = []
    for role, value in values.items():
        knob = knobs.get(role)
        if knob is None or knob.minimum is None or knob.maximum is None or \
                knob.maximum <= knob.minimum:
            continue
        name, unit = _label(knob)
        for side, bound in (("upper", knob.maximum), ("lower", knob.minimum)):
            if bound <= 0:
                continue
            share = abs(value - bound) / bound
            if share <= 1e-9:
                notes.append(f"{name} is at its {side} bound {engineering(bound, unit, 4)}")
            elif share <= near:
                notes.append(f"{name} = {engineering(value, unit, 4)} is within {share * 100:.1f} % "
                             f"of its {side} bound {engineering(bound, unit, 4)}")
            else:
                continue
            break
    gain = "faster settling" if objective == "settling" else "more bandwidth"
    return f" ({'; '.join(notes)}: a wider bound may give {gain})" if notes else ""


def lead_zero_remark(values: dict[str, float], corners: tuple[CornerResult, ...],
                     gm2: dict[str, float]) -> str | None:
    """A warning when the lead zero sits below a corner's unity-gain frequency, or None.

    The Miller branch's zero is ωz = 1/(Cc·(1/gm2 − Rc)) (Gray, Hurst, Lewis, Meyer,
    "Analysis and Design of Analog Integrated Circuits", ch. 9; negative: in the left half
    plane). A left-half-plane zero below the unity-gain frequency leaves a closed-loop pole
    close to it, a pole-zero doublet: the step settles with a slow tail of time constant
    about 1/|ωz| that the phase margin does not show (Kamath, Meyer, Gray, "Relationship
    between frequency response and settling time of operational amplifiers", IEEE JSSC
    9(6), 1974; from memory).

    Parameters
    ----------
    values
        The chosen ``cc`` (F) and ``rc`` (Ω).
    corners
        The verified results at those values.
    gm2
        Corner name -> the second-stage transconductance there, S.

    Returns
    -------
    str or None
        One sentence naming the corner where the zero sits lowest against the unity-gain
        frequency, and how many more corners have it below theirs.
    """
    if "cc" not in values or "rc" not in values:
        return None
    below = []
    for c in corners:
        g = gm2.get(c.corner.name)
        if c.margins is None or c.margins.unity_gain_hz is None or not g or g <= 0:
            continue
        omega = rhp_zero_rad_s(values["cc"], g, values["rc"])
        if not math.isfinite(omega) or omega >= 0:
            continue
        zero_hz = -omega / (2 * math.pi)
        if zero_hz < c.margins.unity_gain_hz:
            below.append((zero_hz / c.margins.unity_gain_hz, zero_hz, c))
    if not below:
        return None
    _, zero_hz, c = min(below, key=lambda b: b[0])
    more = f" (and at {len(below) - 1} more corners)" if len(below) > 1 else ""
    return (f"the lead zero 1/(2π·Cc·(Rc − 1/gm2)) = {engineering(zero_hz, 'Hz')} sits below "
            f"the unity-gain frequency {engineering(c.margins.unity_gain_hz, 'Hz')} at corner "
            f"{c.corner.name}{more}: the pole-zero doublet it makes settles with a slow tail "
            f"of time constant about {engineering(1 / (2 * math.pi * zero_hz), 's')}; "
            "a smaller Rc (with more Cc) moves the zero up")


def mismatch_remark(job, extra: dict) -> str | None:
    """A remark when a fully-differential ``job``'s maps needed more than one round
    (``extra``: the map strategy's record, with its ``rounds``): the halves are then likely
    mismatched, so the loop gain is not bilinear in one branch impedance; None otherwise."""
    rounds = extra.get("rounds", 1)
    if not job.amplifier.fully_differential or rounds <= 1:
        return None
    return (f"the maps of this fully-differential amplifier disagreed with the simulation "
            f"and were characterised again around the point ({rounds} rounds): with "
            "mismatched halves the loop gain is a ratio of quadratics in the branch "
            "impedance, not bilinear; the reported margins are the simulated ones")


def settling_remark(job, extra: dict) -> str | None:
    """A remark when a corner's simulated settling time (the step transient) differs from
    the small-signal prediction of the maps by more than SETTLING_AGREEMENT (``extra``:
    the map strategy's record, with ``settling`` per corner); None otherwise. The maps are
    exact to about 1e-12 in the response; what differs is the transient's step, whose
    weak nonlinearity moves a settling time into a 0.1 % band by tens of percent.

    Parameters
    ----------
    job
        The job (its ``[transient].step``).
    extra
        The map strategy's record.
    """
    agreement = extra.get("settling") or {}
    far = {n: a["relative"] for n, a in agreement.items()
           if a["relative"] is not None and abs(a["relative"]) > SETTLING_AGREEMENT}
    if not far:
        return None
    name = max(far, key=lambda n: abs(far[n]))
    return (f"corner {name}: the simulated settling time differs from the small-signal "
            f"prediction by {far[name]:+.0%} ({len(far)} corners beyond "
            f"{SETTLING_AGREEMENT:.0%}): the step [transient].step = "
            f"{engineering(abs(job.transient.step_v), 'V')} is not small enough for this "
            "amplifier to be linear; a smaller step brings them together")


def second_stage_gm(evaluator: Evaluator) -> dict[str, float] | None:
    """gm (S) of ``[amplifier].second_stage_device`` per corner from the operating point.

    The Rc–Cc branch carries no DC current, so the operating point is that of the
    netlist's values; the request is the textbook strategy's (input device included when
    named), so after that strategy it comes from the journal. None without a second-stage
    device, with a device standing in for Rc, or when ngspice cannot give the figure.

    Parameters
    ----------
    evaluator
        Runs the operating point at every corner of its job.
    """
    amplifier = evaluator.amplifier
    names = amplifier.job.amplifier
    if not names.second_stage_device or amplifier.device is not None:
        return None
    quantities = {}
    if names.input_device:
        quantities["gm1"] = gm_quantity(names.input_device)
    quantities["gm2"] = gm_quantity(names.second_stage_device)
    try:
        found = evaluator.device_quantities(quantities, evaluator.full_values({}))
    except SimulatorError:
        return None
    return {name: q["gm2"] for name, q in found.items()}
