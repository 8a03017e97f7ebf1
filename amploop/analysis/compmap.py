"""The compensation map: the loop gain at every (Cc, Rc) from three analyses per corner.

The series Rc–Cc branch carries no DC current, so the operating point does not depend on
Rc or Cc, and every small-signal response of the circuit is a bilinear (Möbius) function
of the branch impedance Z(s) = Rc + 1/(sCc) at each frequency (the extra element theorem:
R. D. Middlebrook, "Null double injection and the extra element theorem", IEEE Trans.
Education 32(3), 1989):

    H(Z) = (a + b·Z) / (1 + c·Z),  a, b, c functions of frequency only.

With the double-injection probe both measured quantities, v(b) of the first run and the
probe current of the second, share the denominator (the driving-point impedance seen by
the branch with the probe sources zeroed is the same in both runs), so
u = 1/(1 + T) = v(b) + ix is itself bilinear in Z; so is T = 1/u − 1. Three samples at
three branch impedances fix a, b, c exactly. They must differ in Cc: at low frequency
Z ≈ 1/(sCc) for every sample of one Cc, and the map would be ill-posed there.

The map is evaluated through the cross-ratio form of the Möbius map through three
points, which never divides by (Z − Z_k): a query may equal a sample, or be infinite
(Cc → 0, the branch open). Pure functions on arrays.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse, LoopGainMap

__all__ = ["CompensationMap", "branch_impedance", "mobius_through_three"]


def branch_impedance(frequency_hz: np.ndarray, cc_f, rc_ohm) -> np.ndarray:
    """Z(j2πf) = Rc + 1/(j2πf·Cc) in ohms, broadcast over the inputs; Cc = 0 gives inf.

    Parameters
    ----------
    frequency_hz
        Frequencies, Hz.
    cc_f
        Cc, farads (0: the branch is open).
    rc_ohm
        Rc, ohms.
    """
    s = 2j * np.pi * np.asarray(frequency_hz, dtype=float)
    cc = np.asarray(cc_f, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.asarray(rc_ohm, dtype=float) + 1.0 / (s * cc)
    return np.where(cc == 0, np.inf + 0j, z)


def mobius_through_three(z: tuple, w: tuple, query: np.ndarray) -> np.ndarray:
    """The Möbius map through (z1, w1), (z2, w2), (z3, w3), evaluated at ``query``.

    From the cross ratio (w − w1)(w2 − w3) / ((w − w3)(w2 − w1)) =
    (q − z1)(z2 − z3) / ((q − z3)(z2 − z1)), solved for w without dividing by (q − z_k):

        w = [w1(w2−w3)(q−z3)(z2−z1) − w3(w2−w1)(q−z1)(z2−z3)]
            / [(w2−w3)(q−z3)(z2−z1) − (w2−w1)(q−z1)(z2−z3)]

    and, for q = ∞, the limit of the same expression. All arguments broadcast together.

    Parameters
    ----------
    z
        (z1, z2, z3): the three points the map goes through, distinct.
    w
        (w1, w2, w3): their images.
    query
        Where to evaluate the map; may equal a z_k or be infinite.
    """
    z1, z2, z3 = (np.asarray(v) for v in z)
    w1, w2, w3 = (np.asarray(v) for v in w)
    q = np.asarray(query)
    infinite = ~np.isfinite(q)
    qf = np.where(infinite, 0.0, q)
    numerator = w1 * (w2 - w3) * (qf - z3) * (z2 - z1) - w3 * (w2 - w1) * (qf - z1) * (z2 - z3)
    denominator = (w2 - w3) * (qf - z3) * (z2 - z1) - (w2 - w1) * (qf - z1) * (z2 - z3)
    limit_num = w1 * (w2 - w3) * (z2 - z1) - w3 * (w2 - w1) * (z2 - z3)
    limit_den = (w2 - w3) * (z2 - z1) - (w2 - w1) * (z2 - z3)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(infinite, limit_num / limit_den, numerator / denominator)


@dataclass(frozen=True)
class CompensationMap(LoopGainMap):
    """One corner's loop gain as a function of (Cc, Rc), from three samples.

    Attributes
    ----------
    frequency_hz
        The analysis frequencies, Hz.
    samples
        The three (Cc in F, Rc in Ω) the corner was simulated at.
    inverse_return
        u = 1/(1 + T) at each sample: shape (3, n_frequencies), complex.
    """

    frequency_hz: np.ndarray
    samples: tuple[tuple[float, float], tuple[float, float], tuple[float, float]]
    inverse_return: np.ndarray

    @classmethod
    def from_loop_gains(cls, samples, responses: list[FrequencyResponse]) -> CompensationMap:
        """Build the map from three simulated loop gains at ``samples`` ((Cc, Rc) pairs).

        Parameters
        ----------
        samples
            Three (Cc in farads, Rc in ohms) pairs, with three different values of Cc.
        responses
            The loop gain simulated at each sample, in the same order, on one frequency
            grid.

        Raises
        ------
        ValueError
            For other than three samples, two samples with the same Cc, or responses on
            different frequency grids.
        """
        if len(samples) != 3 or len(responses) != 3:
            raise ValueError("a compensation map needs exactly three samples")
        if len({cc for cc, _ in samples}) != 3:
            raise ValueError("the three samples must differ in Cc")
        frequency = responses[0].frequency_hz
        for response in responses[1:]:
            if response.frequency_hz.shape != frequency.shape or not np.allclose(
                    response.frequency_hz, frequency, rtol=1e-12):
                raise ValueError("the three samples must share one frequency grid")
        u = np.stack([1.0 / (1.0 + r.values) for r in responses])
        return cls(frequency_hz=frequency, samples=tuple(samples), inverse_return=u)

    def _sample_impedances(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return tuple(branch_impedance(self.frequency_hz, cc, rc) for cc, rc in self.samples)

    def coefficients(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """(a, b, c, d) per frequency with T(Z) = (a·Z + b)/(c·Z + d).

        The cross-ratio numerator and denominator of u = 1/(1+T) are linear in the query:
        N = c·Z + d and D = (a + c)·Z + (b + d); T = D/N − 1 = (a·Z + b)/(c·Z + d).
        """
        cached = self.__dict__.get("_coefficients")
        if cached is not None:
            return cached
        z1, z2, z3 = self._sample_impedances()
        w1, w2, w3 = self.inverse_return
        p = w1 * (w2 - w3) * (z2 - z1)
        q = w3 * (w2 - w1) * (z2 - z3)
        r = (w2 - w3) * (z2 - z1)
        t = (w2 - w1) * (z2 - z3)
        c, d = p - q, -(p * z3 - q * z1)       # N = c·Z + d
        e, f = r - t, -(r * z3 - t * z1)       # D = e·Z + f
        result = (e - c, f - d, c, d)
        object.__setattr__(self, "_coefficients", result)
        return result

    def loop_gain_values(self, cc_f, rc_ohm, frequency_index=None) -> np.ndarray:
        """Complex T at every frequency for each (Cc, Rc); shape ``broadcast(cc, rc) + (n_f,)``.

        Parameters
        ----------
        cc_f
            Cc, farads (0: the branch is open).
        rc_ohm
            Rc, ohms; ``cc_f`` and ``rc_ohm`` broadcast against each other (e.g. a column
            and a row give a grid).
        frequency_index
            Picks a subset of the frequencies (for fast searches); None for all of them.
        """
        a, b, c, d = self.coefficients()
        frequency = self.frequency_hz
        if frequency_index is not None:
            a, b, c, d = a[frequency_index], b[frequency_index], c[frequency_index], d[frequency_index]
            frequency = frequency[frequency_index]
        cc = np.asarray(cc_f, dtype=float)[..., None]
        rc = np.asarray(rc_ohm, dtype=float)[..., None]
        s = 2j * np.pi * frequency
        with np.errstate(divide="ignore", invalid="ignore"):
            # multiply through by s·Cc so that Cc = 0 (an open branch) needs no infinity:
            # T = (a·(s·Cc·Rc + 1) + b·s·Cc) / (c·(s·Cc·Rc + 1) + d·s·Cc)
            scc = s * cc
            z_scaled = scc * rc + 1.0
            return (a * z_scaled + b * scc) / (c * z_scaled + d * scc)
