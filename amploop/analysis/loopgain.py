"""The loop gain as one frequency-response type, and the probe formulas that produce it.

The loop gain T(jω) is the return ratio around the feedback loop, signed so that
negative feedback gives T > 0 at DC; the closed loop's characteristic is 1 + T.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

__all__ = ["FrequencyResponse", "LoopGainMap", "double_injection", "unwrap_from_dc", "voltage_break"]


@dataclass(frozen=True)
class FrequencyResponse:
    """A complex frequency response on an increasing frequency grid.

    Attributes
    ----------
    frequency_hz
        Frequencies in Hz, strictly increasing, float64.
    values
        The complex response at each frequency (dimensionless for a loop gain).
    """

    frequency_hz: np.ndarray
    values: np.ndarray

    def __post_init__(self) -> None:
        f = np.asarray(self.frequency_hz, dtype=float)
        v = np.asarray(self.values, dtype=complex)
        if f.ndim != 1 or v.shape != f.shape:
            raise ValueError("frequency and values must be 1-D arrays of the same length")
        if f.size < 2 or np.any(np.diff(f) <= 0) or f[0] <= 0:
            raise ValueError("frequencies must be positive and strictly increasing")
        object.__setattr__(self, "frequency_hz", f)
        object.__setattr__(self, "values", v)

    @cached_property
    def magnitude_db(self) -> np.ndarray:
        """20·log10|T| in dB."""
        with np.errstate(divide="ignore"):
            return 20.0 * np.log10(np.abs(self.values))

    @cached_property
    def phase_deg(self) -> np.ndarray:
        """Phase in degrees, unwrapped and anchored so the lowest frequency lies in (−180, 180]."""
        return unwrap_from_dc(self.values)


def unwrap_from_dc(values: np.ndarray) -> np.ndarray:
    """Unwrapped phase (degrees) of a complex response, continuous from its first point.

    The first point is taken in (−180°, 180°]; each later point continues it without
    jumps of more than 180° (numpy's unwrap), so a loop that falls through −180° reads
    −190°, not +170°.

    Parameters
    ----------
    values
        The complex response, in frequency order from the lowest frequency.
    """
    return np.degrees(np.unwrap(np.angle(values)))


def double_injection(v_b_run1: np.ndarray, i_series_run2: np.ndarray) -> np.ndarray:
    """Loop gain from a series-voltage and a shunt-current injection at one break point.

    The loop is broken between the amplifier side ``a`` and the feedback side ``b`` by a
    series voltage source from ``b`` (+) to ``a`` (AC 1 in run 1), with a current source
    from ground into ``a`` (AC 1 in run 2). With the voltage loop gain Tv = −v(a)/v(b)
    (run 1) and the current loop gain Ti = −iy/ix (run 2, ix = −(the series source's
    current) flowing from ``a`` into the feedback side), the true loop gain is

        T = (Tv·Ti − 1) / (Tv + Ti + 2),  equivalently  1/(1+T) = 1/(1+Tv) + 1/(1+Ti)

    (R. D. Middlebrook, "Measurement of loop gain in feedback systems",
    Int. J. Electronics 38(4), 1975). Since 1/(1+Tv) = v(b) and 1/(1+Ti) = ix when the
    injected quantities are 1, T = 1/(v(b) + ix) − 1. Neither source changes the DC
    operating point (both are 0 at DC) and the feedback network's loading stays in place.

    Parameters
    ----------
    v_b_run1
        The feedback side's node voltage in run 1 (complex, V per V injected; the
        amplifier side's follows from v(b) − v(a) = 1).
    i_series_run2
        ngspice's branch current of the series source in run 2 (A per A injected; positive from
        its + terminal ``b`` through it to ``a``).

    Returns
    -------
    numpy.ndarray
        Complex loop gain.
    """
    ix = -np.asarray(i_series_run2, dtype=complex)
    return 1.0 / (np.asarray(v_b_run1, dtype=complex) + ix) - 1.0


def voltage_break(v_a: np.ndarray, v_b: np.ndarray) -> np.ndarray:
    """Loop gain of a plain break with a voltage driven into side ``b``: T = −v(a)/v(b).

    Exact only when the feedback side does not load the amplifier side; with the
    large-inductor/large-capacitor break the amplifier output then sees no feedback
    network at AC, which is why that break overstates the loop gain of a loaded output.

    Parameters
    ----------
    v_a
        Node voltage (complex) on the amplifier side ``a`` of the break.
    v_b
        Node voltage (complex) on the feedback side ``b``, where the AC voltage is driven.
    """
    return -np.asarray(v_a, dtype=complex) / np.asarray(v_b, dtype=complex)


class LoopGainMap:
    """What every compensation map offers (the one-impedance map, the two-element map, the
    port map): the loop gain at any (Cc, Rc) of one corner, predicted without simulating.
    A subclass has ``frequency_hz`` and implements :meth:`loop_gain_values`."""

    frequency_hz: np.ndarray

    def loop_gain_values(self, cc_f, rc_ohm, frequency_index=None) -> np.ndarray:
        """Complex T at every frequency for each (Cc, Rc); shape ``broadcast(cc, rc) + (n_f,)``.

        Parameters
        ----------
        cc_f
            Cc, farads (0: the branch is open).
        rc_ohm
            Rc, ohms; broadcast against ``cc_f``.
        frequency_index
            Picks a subset of the frequencies; None for all of them.
        """
        raise NotImplementedError

    def loop_gain(self, cc_f: float, rc_ohm: float) -> FrequencyResponse:
        """The predicted loop gain at one Cc, ``cc_f`` (farads), and Rc, ``rc_ohm`` (ohms)."""
        return FrequencyResponse(self.frequency_hz, self.loop_gain_values(cc_f, rc_ohm))
