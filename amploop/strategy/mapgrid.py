"""The grids the map solver searches, and the worst-corner figures on them: log-spaced
Cc, Rc with 0 where its bound allows, every corner's margins on the whole grid at once
(:func:`~amploop.analysis.margins.grid_margins`), and the common-mode loop of a
fully-differential amplifier as a constraint on the same grid. Pure functions on arrays."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.margins import grid_margins

__all__ = ["CommonModeLoop", "cc_grid", "rc_grid", "worst_on_grid"]


@dataclass(frozen=True)
class CommonModeLoop:
    """A fully-differential amplifier's common-mode loop on the maps, and what it must reach.

    Attributes
    ----------
    maps
        One compensation map of the common-mode loop gain per corner (by name).
    aim_pm
        Its worst-corner phase margin to reach, degrees; None: not constrained.
    gm_min
        Its worst-corner gain margin to reach, dB; None: not constrained.
    """

    maps: dict[str, CompensationMap]
    aim_pm: float | None = None
    gm_min: float | None = None

    def grid(self, cc: np.ndarray, rc: np.ndarray, every: int = 1):
        """Its worst-corner (PM, GM) on the ``cc`` × ``rc`` grid (F, Ω), at every ``every``-th
        frequency."""
        pm_w, _, gm_w, _ = worst_on_grid(self.maps, cc, rc, every)
        return pm_w, gm_w

    def shortfall(self, pm_w, gm_w):
        """How far (degrees or dB, 0 where met) the grid figures ``pm_w``, ``gm_w`` miss."""
        short = np.zeros_like(pm_w)
        if self.aim_pm is not None:
            short = np.maximum(short, self.aim_pm - pm_w)
        if self.gm_min is not None:
            short = np.maximum(short, np.where(np.isfinite(gm_w), self.gm_min - gm_w, 0.0))
        return short


def cc_grid(low: float, high: float, n: int) -> np.ndarray:
    """``n`` log-spaced capacitances (F) over [``low``, ``high``]; ``low`` alone when
    ``high`` is not above it."""
    if high <= low:
        return np.array([low])
    return np.geomspace(low, high, n)


def rc_grid(low: float, high: float, n: int) -> np.ndarray:
    """``n`` resistances (Ω) over [``low``, ``high``]: log-spaced, or, when ``low`` is 0, 0
    and ``n`` − 1 log-spaced from 1e-4·``high`` (1 mΩ at least); ``low`` alone when ``high``
    is not above it."""
    if high <= low:
        return np.array([low])
    if low <= 0:
        return np.concatenate([[0.0], np.geomspace(max(high * 1e-4, 1e-3), high, n - 1)])
    return np.geomspace(low, high, n)


def worst_on_grid(maps: dict[str, CompensationMap], cc: np.ndarray, rc: np.ndarray,
                   every: int = 1, rc_of=None):
    """Worst-corner PM (deg), UGF (Hz), GM (dB) on the ``cc`` × ``rc`` grid, and the
    index of the PM corner.

    Parameters
    ----------
    maps
        One compensation map per corner (by name).
    cc, rc
        The grid's axes: Cc in farads, Rc in ohms (the device's size with ``rc_of``).
    every
        Use every n-th analysis frequency (> 1: a faster, coarser first look).
    rc_of
        For a device standing in for Rc: corner name -> function from its size to that
        corner's channel resistance (Ω); None for a resistor.
    """
    shape = (cc.size, rc.size)
    pm_w = np.full(shape, np.inf)
    ugf_w = np.full(shape, np.inf)
    gm_w = np.full(shape, np.inf)
    limiting = np.zeros(shape, dtype=int)
    for index, (name, cmap) in enumerate(maps.items()):
        pick = slice(None, None, every)
        rc_here = rc if rc_of is None else rc_of[name](rc)
        values = cmap.loop_gain_values(cc[:, None], rc_here[None, :], frequency_index=pick)
        pm, ugf, gm = grid_margins(cmap.frequency_hz[pick], values)
        pm = np.where(np.isnan(pm), -np.inf, pm)
        ugf = np.where(np.isnan(ugf), 0.0, ugf)
        limiting = np.where(pm < pm_w, index, limiting)
        pm_w = np.minimum(pm_w, pm)
        ugf_w = np.minimum(ugf_w, ugf)
        gm_w = np.minimum(gm_w, gm)
    return pm_w, ugf_w, gm_w, limiting
