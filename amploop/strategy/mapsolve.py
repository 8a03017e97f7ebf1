"""Solving the multi-corner compensation problem on compensation maps, in numpy.

Given one :class:`~amploop.analysis.compmap.CompensationMap` per corner, find the (Cc, Rc) within
the bounds that maximises the worst-corner unity-gain frequency subject to worst-corner
phase margin ≥ the aim and gain margin ≥ its minimum. A coarse grid over the bounds
(log-spaced Cc; Rc log-spaced with 0 added when the lower bound is 0) is searched with
the vectorised :func:`~amploop.analysis.margins.grid_margins`, then four zoom levels refine around
the best point; the final figures come from the exact :func:`~amploop.analysis.margins.loop_margins`.
When no point is feasible, the same search minimises the shortfall instead.
:func:`round_on_maps` then picks the point with 4 significant digits (what a designer
writes into the netlist) next to the optimum that stays on its feasible side.
Pure functions: no files, no simulator.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.margins import loop_margins
from amploop.strategy.mapgrid import CommonModeLoop, cc_grid, rc_grid, worst_on_grid
from amploop.strategy.settlemap import SettlingLoop

__all__ = ["MapSolution", "predicted_worst", "round_on_maps", "rounded_neighbours",
           "solve_on_maps"]


@dataclass(frozen=True)
class MapSolution:
    """The best point found on the maps, with its predicted worst-corner figures.

    Attributes
    ----------
    cc
        Cc, farads.
    rc
        Rc, ohms (the device's size when a device stands in for Rc).
    feasible
        Whether the point meets the phase-margin aim and the gain-margin minimum.
    phase_margin_deg
        The predicted worst-corner phase margin, degrees.
    unity_gain_hz
        The predicted worst-corner unity-gain frequency, Hz.
    gain_margin_db
        The predicted worst-corner gain margin, dB; None when no corner has a phase
        crossover.
    phase_margin_corner
        The corner with the smallest predicted phase margin.
    common_mode_phase_margin_deg
        The predicted worst-corner phase margin of the common-mode loop, degrees; None
        without one.
    settling_time_s
        The predicted worst-corner small-signal settling time, seconds (inf: a corner does
        not settle in the step run); None when settling is not predicted.
    settling_corner
        The corner with the longest predicted settling time; None without one.
    """

    cc: float
    rc: float
    feasible: bool
    phase_margin_deg: float
    unity_gain_hz: float
    gain_margin_db: float | None
    phase_margin_corner: str
    common_mode_phase_margin_deg: float | None = None
    settling_time_s: float | None = None
    settling_corner: str | None = None


def _score(pm_w, ugf_w, gm_w, aim_pm: float, gm_min: float | None):
    """Feasible mask and a score to maximise (UGF where feasible, −shortfall otherwise)."""
    gm_ok = np.ones_like(pm_w, dtype=bool) if gm_min is None else gm_w >= gm_min
    feasible = (pm_w >= aim_pm) & gm_ok & (ugf_w > 0)
    shortfall = np.maximum(aim_pm - pm_w, 0.0)
    if gm_min is not None:
        shortfall = np.maximum(shortfall, np.where(np.isfinite(gm_w), gm_min - gm_w, 0.0))
    return feasible, shortfall


def _best_index(pm_w, ugf_w, gm_w, aim_pm, gm_min, cm_short=None, judge=None):
    """The best grid index and whether it is feasible; ``judge``(feasible, shortfall) adds
    the settling constraint and objective (:meth:`~.settlemap.SettlingLoop.judge`)."""
    feasible, shortfall = _score(pm_w, ugf_w, gm_w, aim_pm, gm_min)
    if cm_short is not None:  # the common-mode loop's constraints
        feasible = feasible & (cm_short <= 0)
        shortfall = np.maximum(shortfall, cm_short)
    objective = ugf_w
    if judge is not None:
        feasible, shortfall, settling_score = judge(feasible, shortfall)
        if settling_score is not None:
            objective = settling_score
    if feasible.any():
        # ties (the same settling time) go to the larger unity-gain frequency
        score = np.where(feasible, objective, -np.inf)
        best = np.nonzero(score == score.max())
        pick = int(np.argmax(ugf_w[best]))
        return (int(best[0][pick]), int(best[1][pick])), True
    # nothing feasible: least shortfall, then the largest phase margin
    score = -shortfall * 1e3 + np.where(np.isfinite(pm_w), pm_w, -1e9) * 1e-3
    return np.unravel_index(np.argmax(score), score.shape), False


def predicted_worst(maps: dict[str, CompensationMap], cc: float, rc: float, rc_of=None):
    """Exact worst-corner (PM deg, UGF Hz, GM dB or None, limiting corner) at one point.

    Parameters
    ----------
    maps
        One compensation map per corner (by name).
    cc
        Cc, farads.
    rc
        Rc, ohms; or, with ``rc_of``, the size of the device standing in for Rc.
    rc_of
        For a device standing in for Rc: corner name -> function from the device's size to
        that corner's channel resistance (Ω); None for a resistor.
    """
    worst_pm, worst_ugf, worst_gm, limiting = np.inf, np.inf, None, ""
    for name, cmap in maps.items():
        rc_here = rc if rc_of is None else float(rc_of[name](np.array([rc]))[0])
        m = loop_margins(cmap.loop_gain(cc, rc_here))
        pm = m.phase_margin_deg if m.phase_margin_deg is not None else -np.inf
        ugf = m.unity_gain_hz if m.unity_gain_hz is not None else 0.0
        if pm < worst_pm:
            worst_pm, limiting = pm, name
        worst_ugf = min(worst_ugf, ugf)
        if m.gain_margin_db is not None:
            worst_gm = m.gain_margin_db if worst_gm is None else min(worst_gm, m.gain_margin_db)
    return float(worst_pm), float(worst_ugf), worst_gm, limiting


def solve_on_maps(
    maps: dict[str, CompensationMap],
    cc_bounds: tuple[float, float],
    rc_bounds: tuple[float, float],
    aim_pm: float,
    gm_min: float | None = None,
    *,
    points: int = 31,
    zooms: int = 4,
    rc_of: dict | None = None,
    common_mode: CommonModeLoop | None = None,
    rule=None,
    settling: SettlingLoop | None = None,
) -> MapSolution:
    """The (Cc, Rc) that maximises the worst-corner unity-gain frequency on the maps (or
    minimises the worst-corner settling time).

    Parameters
    ----------
    maps
        One compensation map per corner (by name).
    cc_bounds, rc_bounds
        (min, max) in F and Ω; equal bounds fix the value.
    aim_pm
        Worst-corner phase margin to reach, degrees.
    gm_min
        Worst-corner gain margin to reach, dB (None: no constraint).
    points
        Grid points per axis for the coarse search.
    zooms
        Refinement levels around the best grid point (9 × 9 each, every frequency).
    rc_of
        For a device standing in for Rc: corner name -> function from the device's size to
        that corner's channel resistance (Ω); ``rc_bounds`` are then size bounds.
    common_mode
        A fully-differential amplifier's common-mode loop and its targets, held as
        constraints too (the objective stays the main loop's unity-gain frequency).
    rule
        The statistical rule for the Monte Carlo samples among the corners
        (:class:`~.samplerule.SampleRule`): they are held to it instead of each to the aim;
        None: every corner to the aim.
    settling
        The closed loop's maps: its settling time becomes the objective (``minimise``) and
        its ceiling a constraint. Settling is computed at the points that meet the margins
        only; the coarse grid then has at most 15 points per axis and the zooms 7 × 7.

    Returns
    -------
    MapSolution
        ``feasible`` False means no grid point met the constraints; the point returned then
        has the least shortfall (the best worst-corner margin reachable).
    """
    def best(cc, rc, every=1):
        pm_w, ugf_w, gm_w, extra = _grid_figures(maps, cc, rc, every, rc_of, common_mode, rule)
        judge = None if settling is None else (
            lambda feasible, short: settling.judge(cc, rc, ugf_w, feasible, short))
        return _best_index(pm_w, ugf_w, gm_w, aim_pm, gm_min, extra, judge)

    if settling is not None:
        points = min(points, 15)
    side = 9 if settling is None else 7
    cc = cc_grid(*cc_bounds, points)
    rc = rc_grid(*rc_bounds, points)
    (i, j), feasible = best(cc, rc, every=2)
    best_cc, best_rc = float(cc[i]), float(rc[j])
    for _ in range(zooms):
        cc_lo, cc_hi = cc[max(i - 1, 0)], cc[min(i + 1, cc.size - 1)]
        rc_lo, rc_hi = rc[max(j - 1, 0)], rc[min(j + 1, rc.size - 1)]
        cc = np.unique(np.concatenate([np.geomspace(cc_lo, cc_hi, side) if cc_hi > cc_lo
                                       else [cc_lo], [best_cc]]))
        rc = np.unique(np.concatenate([np.linspace(rc_lo, rc_hi, side) if rc_hi > rc_lo
                                       else [rc_lo], [best_rc]]))
        (i, j), feasible = best(cc, rc)
        best_cc, best_rc = float(cc[i]), float(rc[j])
    pm, ugf, gm, limiting = predicted_worst(maps, best_cc, best_rc, rc_of)
    return MapSolution(cc=best_cc, rc=best_rc, feasible=feasible, phase_margin_deg=pm,
                       unity_gain_hz=ugf, gain_margin_db=gm, phase_margin_corner=limiting,
                       common_mode_phase_margin_deg=_cm_pm(common_mode, best_cc, best_rc),
                       **_settling_of(settling, best_cc, best_rc, ugf))


def _settling_of(settling: SettlingLoop | None, cc: float, rc: float, ugf: float) -> dict:
    """The predicted worst-corner settling time and its corner at (``cc``, ``rc``), as
    :class:`MapSolution` fields (none without ``settling``)."""
    if settling is None:
        return {}
    time_s, corner = settling.worst(cc, rc, ugf)
    return {"settling_time_s": time_s, "settling_corner": corner}


def _grid_figures(maps, cc, rc, every, rc_of, common_mode, rule):
    """(worst PM, worst UGF, worst GM, extra shortfall or None) on the ``cc`` × ``rc`` grid:
    PM and GM over the corners held to the aim one by one (all but ``rule``'s samples), UGF
    over every corner, and the shortfall of the common-mode loop and of ``rule``."""
    plain = maps if rule is None else {n: m for n, m in maps.items() if n not in rule.members}
    pm_w, ugf_w, gm_w, _ = worst_on_grid(plain, cc, rc, every, rc_of)
    extra = None if common_mode is None else common_mode.shortfall(
        *common_mode.grid(cc, rc, every))
    if rule is not None:
        short, ugf_s = rule.grid(maps, cc, rc, every)
        ugf_w = np.minimum(ugf_w, ugf_s)
        extra = short if extra is None else np.maximum(extra, short)
    return pm_w, ugf_w, gm_w, extra


def _cm_pm(common_mode: CommonModeLoop | None, cc: float, rc: float) -> float | None:
    """The common-mode loop's predicted worst-corner phase margin at (``cc``, ``rc``)."""
    return None if common_mode is None else predicted_worst(common_mode.maps, cc, rc)[0]


def rounded_neighbours(value: float, bounds: tuple[float, float], digits: int = 4,
                       reach: int = 2) -> list[float]:
    """Values with ``digits`` significant digits around ``value``, kept inside ``bounds``.

    ``reach`` steps of the last digit below and above: with ``reach`` = 2 and
    ``value`` = 2.95812e-13, [2.957e-13, 2.958e-13, 2.959e-13, 2.96e-13] (sorted, without
    repeats; a value clipped to a bound is the bound itself). 0 and non-finite values are
    only clipped.

    Parameters
    ----------
    value
        The value, SI.
    bounds
        (min, max), SI.
    digits
        Significant digits of the neighbours.
    reach
        How many steps of the last digit to go each way.
    """
    low, high = bounds
    if value == 0 or not math.isfinite(value):
        return [min(max(value, low), high)]
    step = 10.0 ** (math.floor(math.log10(abs(value))) - digits + 1)
    down, up = math.floor(value / step), math.ceil(value / step)
    candidates = [(down - k) * step for k in range(reach)] + [(up + k) * step for k in range(reach)]
    return sorted({min(max(float(f"{v:.{digits}g}"), low), high) for v in candidates})


def round_on_maps(maps: dict[str, CompensationMap], solution: MapSolution,
                  cc_bounds: tuple[float, float], rc_bounds: tuple[float, float],
                  aim_pm: float, gm_min: float | None = None, *, digits: int = 4,
                  rc_of: dict | None = None,
                  common_mode: CommonModeLoop | None = None, rule=None,
                  settling: SettlingLoop | None = None) -> MapSolution:
    """The point with ``digits`` significant digits next to ``solution`` that keeps its
    constraints met on the maps.

    The optimum usually sits on a constraint (the phase-margin aim, or the gain-margin
    minimum, which has no slack), so rounding each value to its nearest neighbour can
    step just outside it (9.9956 dB against 10 dB). Instead, every pair of
    :func:`rounded_neighbours` of Cc and Rc (two steps each way) is evaluated exactly on
    the maps (:func:`predicted_worst`) and the best is chosen as in the search: the largest
    worst-corner unity-gain frequency among the feasible pairs, else the least shortfall.

    Parameters
    ----------
    maps
        One compensation map per corner (by name).
    solution
        The optimum found by :func:`solve_on_maps`.
    cc_bounds, rc_bounds
        (min, max) in F and Ω (sizes with ``rc_of``).
    aim_pm
        Worst-corner phase margin to reach, degrees.
    gm_min
        Worst-corner gain margin to reach, dB (None: no constraint).
    digits
        Significant digits of the values.
    rc_of, common_mode, rule, settling
        As for :func:`solve_on_maps`.

    Returns
    -------
    MapSolution
        The rounded point with its predicted figures; ``feasible`` is that of ``solution``
        (whether the problem has an answer within the bounds).
    """
    cc_values = rounded_neighbours(solution.cc, cc_bounds, digits)
    rc_values = rounded_neighbours(solution.rc, rc_bounds, digits)
    figures = [[predicted_worst(maps, cc, rc, rc_of) for rc in rc_values] for cc in cc_values]
    pm = np.array([[f[0] for f in row] for row in figures])
    ugf = np.array([[f[1] for f in row] for row in figures])
    gm = np.array([[np.inf if f[2] is None else f[2] for f in row] for row in figures])
    cm_short = None
    if common_mode is not None:
        cm = [[predicted_worst(common_mode.maps, cc, rc) for rc in rc_values] for cc in cc_values]
        cm_short = common_mode.shortfall(
            np.array([[f[0] for f in row] for row in cm]),
            np.array([[np.inf if f[2] is None else f[2] for f in row] for row in cm]))
    if rule is not None:  # the samples held to the rule, the other corners to the aim
        plain = {n: m for n, m in maps.items() if n not in rule.members}
        rows = [[predicted_worst(plain, cc, rc, rc_of) for rc in rc_values] for cc in cc_values]
        pm = np.array([[f[0] for f in row] for row in rows])
        gm = np.array([[np.inf if f[2] is None else f[2] for f in row] for row in rows])
        short, _ = rule.grid(maps, np.array(cc_values), np.array(rc_values))
        cm_short = short if cm_short is None else np.maximum(cm_short, short)
    judge = None if settling is None else (lambda feasible, short: settling.judge(
        np.array(cc_values), np.array(rc_values), ugf, feasible, short))
    (i, j), _ = _best_index(pm, ugf, gm, aim_pm, gm_min, cm_short, judge)
    best_pm, best_ugf, best_gm, limiting = figures[i][j]
    return replace(solution, cc=cc_values[i], rc=rc_values[j], phase_margin_deg=best_pm,
                   unity_gain_hz=best_ugf, gain_margin_db=best_gm, phase_margin_corner=limiting,
                   common_mode_phase_margin_deg=_cm_pm(common_mode, cc_values[i], rc_values[j]),
                   **_settling_of(settling, cc_values[i], rc_values[j], best_ugf))
