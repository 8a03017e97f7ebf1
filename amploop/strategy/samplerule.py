"""The statistical rule of a ``[target]`` with ``sigma`` or ``yield`` on the compensation
maps: how far each (Cc, Rc) of a grid falls short of it, per base corner's samples.

- ``sigma = k``: the samples' mean phase margin less k sample standard deviations
  (ddof = 1) must reach the aim; the shortfall is the aim less that figure.
- ``yield = y``: at least m of the n samples must meet the aim and the gain-margin
  minimum, m being the fewest whose 95 % Clopper–Pearson lower bound reaches y
  (:func:`~amploop.analysis.statistics.fewest_passing`); the shortfall is the m-th smallest
  of the samples' own shortfalls (an order statistic: 0 exactly where m of them pass).

Corners that are not samples keep the worst-case rule of the map search. Pure numpy.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.margins import grid_margins
from amploop.analysis.statistics import fewest_passing

__all__ = ["SampleRule", "sample_rule"]


@dataclass(frozen=True)
class SampleRule:
    """The statistical rule for the sampled corners.

    Attributes
    ----------
    groups
        Base corner (with ``@configuration``) -> the names of its samples.
    aim_pm
        The phase margin aimed at, degrees.
    gm_min
        The gain-margin minimum, dB (None: none); with ``sigma`` it holds at every sample.
    sigma
        k of "mean − kσ" (None: the yield rule).
    passing
        Base corner -> the fewest of its samples that must pass (the yield rule).
    """

    groups: dict[str, tuple[str, ...]]
    aim_pm: float
    gm_min: float | None = None
    sigma: float | None = None
    passing: dict[str, int] | None = None

    @property
    def members(self) -> set[str]:
        """Every sample's corner name."""
        return {n for names in self.groups.values() for n in names}

    def grid(self, maps: dict, cc: np.ndarray, rc: np.ndarray, every: int = 1):
        """(shortfall, smallest unity-gain frequency) over the samples on the ``cc`` × ``rc``
        grid (F, Ω), from ``maps`` (corner name -> compensation map) at every ``every``-th
        frequency: the largest shortfall of any base corner's samples (degrees, or dB for
        a missed gain margin; 0 where the rule holds) and the samples' smallest UGF (Hz)."""
        shape = (cc.size, rc.size)
        short = np.zeros(shape)
        ugf_w = np.full(shape, np.inf)
        pick = slice(None, None, every)
        for group, names in self.groups.items():
            pms, own, gm_shorts = [], [], []
            for name in names:
                cmap = maps[name]
                values = cmap.loop_gain_values(cc[:, None], rc[None, :], frequency_index=pick)
                pm, ugf, gm = grid_margins(cmap.frequency_hz[pick], values)
                pm = np.where(np.isnan(pm), -np.inf, pm)
                ugf_w = np.minimum(ugf_w, np.where(np.isnan(ugf), 0.0, ugf))
                gm_short = np.zeros(shape) if self.gm_min is None else np.where(
                    np.isfinite(gm), np.maximum(self.gm_min - gm, 0.0), 0.0)
                pms.append(pm)
                gm_shorts.append(gm_short)
                own.append(np.maximum(np.maximum(self.aim_pm - pm, 0.0), gm_short))
            if self.sigma is not None:
                stacked = np.array(pms)
                with np.errstate(invalid="ignore"):
                    figure = np.mean(stacked, axis=0) - self.sigma * np.std(stacked, axis=0,
                                                                             ddof=1)
                figure = np.where(np.isfinite(figure), figure, -1e9)
                group_short = np.maximum(self.aim_pm - figure, 0.0)
                # the gain margin stays a minimum at every sample
                group_short = np.maximum(group_short, np.max(np.array(gm_shorts), axis=0))
            else:
                group_short = np.sort(np.array(own), axis=0)[self.passing[group] - 1]
            short = np.maximum(short, group_short)
        return short, ugf_w


def sample_rule(corners, target, aim_pm: float) -> SampleRule | None:
    """The rule of ``target`` (its ``sigma`` or ``yield``) for the sampled ``corners``
    (:class:`~amploop.spec.model.Corner` objects), aiming at ``aim_pm`` degrees; None when
    the target has no statistical rule or no corner is a sample."""
    if not target.statistical:
        return None
    groups: dict[str, list[str]] = {}
    for corner in corners:
        if corner.group is not None:
            groups.setdefault(corner.group, []).append(corner.name)
    if not groups:
        return None
    passing = None
    if target.yield_fraction is not None:
        passing = {}
        for group, names in groups.items():
            needed = fewest_passing(len(names), target.yield_fraction)
            passing[group] = len(names) if needed is None else needed
    return SampleRule(groups={g: tuple(n) for g, n in groups.items()}, aim_pm=aim_pm,
                      gm_min=target.gain_margin_db, sigma=target.sigma, passing=passing)
