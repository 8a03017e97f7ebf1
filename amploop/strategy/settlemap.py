"""Settling time on the compensation maps: the worst-corner small-signal settling at any (Cc, Rc).

The closed-loop response from the signal source to the output is bilinear in the branch
impedance Z(Cc, Rc) as the loop gain is (the same three characterisations give its
:class:`~amploop.analysis.compmap.CompensationMap`), so at any (Cc, Rc) the map gives H on the
sweep's grid, and :mod:`amploop.analysis.settling` its step response and settling time,
without simulating. The prediction reads the step the way the step check simulates it:
over the run's length after the step (:func:`~amploop.corners.stepcheck.step_window_s`),
with the final value the mean over its last 5 %, into ``[transient].band``. The run's
length is the job's ``[transient].stop``, else 40/(2π·f_u) of the worst corner
(:func:`~amploop.corners.stepcheck.step_stop_s`), predicted here from the loop-gain maps.
Pure functions on arrays; no files, no simulator.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.settling import aaa_fit, settling_time
from amploop.analysis.timedomain import suggested_stop_s
from amploop.corners.stepcheck import step_window_s
from amploop.errors import JobError

__all__ = ["SettlingLoop", "refuse_settling", "settling_agreement"]


@dataclass(frozen=True)
class SettlingLoop:
    """The closed loop's maps, the settling band and what the search does with settling.

    Attributes
    ----------
    maps
        One compensation map of the closed-loop response per corner (by name).
    band
        Settling band relative to the output step (``[transient].band``).
    stop_s
        The step run's length, seconds (``[transient].stop``); None: 40/(2π·f_u) of the
        worst corner, as the step check chooses it.
    minimise
        Whether the worst-corner settling time is the objective (else only a constraint).
    ceiling_s
        The longest settling time a corner may have, seconds; None for no ceiling.
    guard
        The search ranks points by their settling into ``guard``·``band``. Settling time
        jumps where a ringing peak touches the band (by half a ringing period and more),
        and the best point of a search into the band itself sits on such a cliff, where a
        difference of 1e-6 in the response decides which side the simulation lands on;
        into a slightly narrower band the chosen point's peaks stay clear of the band.
    """

    maps: dict[str, CompensationMap]
    band: float
    stop_s: float | None = None
    minimise: bool = True
    ceiling_s: float | None = None
    guard: float = 0.95

    def window_s(self, unity_gain_hz: float) -> float:
        """The time the step run follows the output after its step, seconds, for a worst-
        corner unity-gain frequency ``unity_gain_hz`` (Hz; 0 or less: 1 µs runs)."""
        if self.stop_s is not None:
            return step_window_s(self.stop_s)
        return step_window_s(suggested_stop_s(unity_gain_hz) if unity_gain_hz > 0 else 1e-6)

    def corner_time(self, name: str, cc: float, rc: float, window_s: float,
                    every: int = 1, band: float | None = None) -> float:
        """Corner ``name``'s predicted settling time, seconds (inf: does not settle in the run).

        Parameters
        ----------
        name
            The corner.
        cc, rc
            Cc, farads; Rc, ohms.
        window_s
            The run's length after the step, seconds.
        every
            Fit every ``every``-th frequency (2 gives the same times to about 1e-7 at a
            third of the cost on the demo).
        band
            The settling band (a share of the step); None: the job's.
        """
        cmap = self.maps[name]
        pick = slice(None, None, every)
        fit = aaa_fit(cmap.frequency_hz[pick], cmap.loop_gain_values(cc, rc, frequency_index=pick))
        value = settling_time(fit, self.band if band is None else band, window_s=window_s)
        return np.inf if value is None else value

    def per_corner(self, cc: float, rc: float, unity_gain_hz: float,
                   window_s: float | None = None) -> dict[str, float]:
        """Each corner's predicted settling time, seconds (inf: does not settle in the run).

        Parameters
        ----------
        cc, rc
            Cc, farads; Rc, ohms.
        unity_gain_hz
            The worst-corner unity-gain frequency there, Hz (sets the run's length).
        window_s
            The run's length after the step, seconds, when known (a simulated run's);
            None: from ``unity_gain_hz``.
        """
        window = self.window_s(unity_gain_hz) if window_s is None else window_s
        return {name: self.corner_time(name, cc, rc, window) for name in self.maps}

    def worst(self, cc: float, rc: float, unity_gain_hz: float) -> tuple[float, str]:
        """The worst-corner predicted settling time, seconds (inf: some corner does not
        settle), and that corner.

        Parameters
        ----------
        cc, rc
            Cc, farads; Rc, ohms.
        unity_gain_hz
            The worst-corner unity-gain frequency there, Hz (sets the run's length).
        """
        times = self.per_corner(cc, rc, unity_gain_hz)
        corner = max(times, key=times.get)
        return float(times[corner]), corner

    def grid(self, cc: np.ndarray, rc: np.ndarray, unity_gain_hz: np.ndarray,
             where: np.ndarray, every: int = 2) -> np.ndarray:
        """Worst-corner settling times into the guarded band, seconds, on a grid.

        Parameters
        ----------
        cc, rc
            The grid's axes, F and Ω.
        unity_gain_hz
            The worst-corner unity-gain frequency on the grid, Hz.
        where
            Boolean mask of the points to evaluate (inf elsewhere, and where a corner does
            not settle).
        every
            As for :meth:`corner_time`.

        Notes
        -----

        Branch and bound: a point stops being evaluated as soon as one corner is slower
        than the best worst-corner time so far (minimising) or than the ceiling; its value
        is then that corner's time, a lower bound that cannot win. Points go fastest
        crossover first and corners slowest-so-far first, so most points stop after one
        or two corners.
        """
        out = np.full((cc.size, rc.size), np.inf)
        order = list(self.maps)
        best = self.ceiling_s or np.inf
        cells = sorted(zip(*np.nonzero(where)), key=lambda ij: -unity_gain_hz[ij])
        for i, j in cells:
            window = self.window_s(float(unity_gain_hz[i, j]))
            worst = 0.0
            for name in list(order):
                worst = max(worst, self.corner_time(name, float(cc[i]), float(rc[j]), window,
                                                    every, self.guard * self.band))
                if worst > best:
                    order.remove(name)
                    order.insert(0, name)      # the corner that decided, first next time
                    break
            out[i, j] = worst
            if self.minimise:
                best = min(best, worst)
        return out

    def judge(self, cc: np.ndarray, rc: np.ndarray, unity_gain_hz: np.ndarray,
              feasible: np.ndarray, shortfall: np.ndarray):
        """The grid's feasibility and shortfall with the ceiling added, and the score to
        maximise (−settling time where it is the objective, else None).

        Parameters
        ----------
        cc, rc, unity_gain_hz
            As for :meth:`grid`.
        feasible
            Boolean mask of the points that meet the margins.
        shortfall
            How far each point misses them (degrees or dB).

        Settling is computed only where ``feasible`` (the margins met), as only those
        points can be chosen; a ceiling missed by 1 % counts as a shortfall of 1 (a degree
        of phase margin) when nothing is feasible.
        """
        times = self.grid(cc, rc, unity_gain_hz, feasible)
        if self.ceiling_s is not None:
            over = np.where(feasible, 100.0 * (times / self.ceiling_s - 1.0), 0.0)
            over = np.where(np.isfinite(over), over, 1e6)
            shortfall = np.maximum(shortfall, over)
            feasible = feasible & (over <= 0)
        score = -times if self.minimise else None
        return feasible, shortfall, score


def settling_agreement(predicted: dict[str, float], simulated: dict[str, float | None]
                       ) -> dict[str, dict]:
    """Per corner: the predicted and the simulated settling time (seconds) and their
    relative difference (predicted/simulated − 1; None where either is missing).

    Parameters
    ----------
    predicted
        Corner name -> predicted settling time, seconds (inf: does not settle).
    simulated
        Corner name -> the step transient's settling time, seconds (None: not settled).
    """
    out = {}
    for name, p in predicted.items():
        s = simulated.get(name)
        p_value = None if not np.isfinite(p) else float(p)
        rel = None if p_value is None or not s else p_value / s - 1.0
        out[name] = {"predicted_s": p_value, "simulated_s": s, "relative": rel}
    return out


def refuse_settling(job, amplifier, strategy: str) -> None:
    """Refuse, in one line, a settling objective or ceiling that cannot be tuned for: only
    the map strategy predicts settling, for a single-ended amplifier with a resistor for Rc
    in amploop's own testbench (its step check needs amploop's input).

    Parameters
    ----------
    job
        The loaded job (its ``target``).
    amplifier
        The prepared amplifier (its device standing in for Rc, its user deck).
    strategy
        The strategy's name.

    Raises
    ------
    JobError
        Naming the job file and the ``[target]`` key.
    """
    if not job.target.needs_settling:
        return
    what = ("objective = \"settling\"" if job.target.objective == "settling"
            else "settling_time")
    place = "[target].objective" if job.target.objective == "settling" else \
        "[target].settling_time"
    problem = None
    if strategy != "map":
        problem = f"the {strategy} strategy cannot tune for settling (use the map strategy)"
    elif job.amplifier.fully_differential:
        problem = "not supported for a fully-differential amplifier yet"
    elif amplifier.device is not None:
        problem = "not supported with a MOSFET standing in for Rc yet"
    elif amplifier.user_deck is not None:
        problem = "not supported with the user's own [testbench] (no step check there)"
    if problem is not None:
        raise JobError(f"{what}: {problem}", file=job.path, place=place)
