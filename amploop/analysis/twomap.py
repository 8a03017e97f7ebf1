"""The compensation map when the node between Rc and Cc carries anything else.

With wiring, a bottom-plate capacitance or any other element on the node between Rc and
Cc, the compensation is no longer one two-terminal impedance: Rc and Cc are two extra
elements. Every small-signal response is then a ratio of two polynomials of first degree
in each element's impedance separately (the two-element form of the extra element
theorem: R. D. Middlebrook, V. Vorpérian and J. Lindal, "The N extra element theorem",
IEEE Trans. Circuits Syst. I 45(9), 1998). In the nodal matrix each element's admittance
enters one rank-one term, so the determinant and every cofactor are affine in each
admittance; multiplied through by Rc·Zc they are affine in Rc and in Zc = 1/(sCc):

    u(Rc, Zc) = (n0 + n1·Rc + n2·Zc + n3·Rc·Zc) / (d0 + d1·Rc + d2·Zc + d3·Rc·Zc)

for u = 1/(1 + T) of the double-injection probe (its two runs share the circuit matrix,
so their sum shares the denominator). Eight coefficients up to one common factor: seven
per frequency, so seven samples fix them exactly. Each sample gives one linear equation
u_k·D(Rc_k, Zc_k) − N(Rc_k, Zc_k) = 0; the coefficient vector is the null vector of the
7 × 8 system (singular value decomposition, per frequency, with Rc and Zc scaled by the
samples' own typical values so that every column is of order one).

Pure functions on arrays.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse, LoopGainMap

__all__ = ["TWO_ELEMENT_SAMPLES", "TwoElementMap", "two_element_samples"]

#: Samples a two-element map needs (seven coefficients per frequency).
TWO_ELEMENT_SAMPLES = 7


def two_element_samples(cc_bounds: tuple[float, float], rc_bounds: tuple[float, float],
                        rc_value: float) -> list[dict[str, float]]:
    """Seven (Cc, Rc) samples in general position for a two-element map.

    Three Cc values across the bounds (15, 50, 85 % of the way on a log scale; 0.8, 1,
    1.25 times Cc when the bounds are equal) times three Rc values, less two corners of
    that 3 × 3 grid. The Rc values are 15, 50 and 85 % of the way across the Rc bounds
    (linear); 0.8, 1 and 1.25 times ``rc_value`` (or 100, 200, 400 Ω about 0) when the
    bounds are equal.

    Parameters
    ----------
    cc_bounds
        (min, max) of Cc, farads.
    rc_bounds
        (min, max) of Rc, ohms.
    rc_value
        The netlist's Rc, ohms, for equal bounds.
    """
    low, high = cc_bounds
    if high <= low:
        ccs = [low * f for f in (0.8, 1.0, 1.25)]
    else:
        span = np.log(high / low)
        ccs = [float(low * np.exp(span * q)) for q in (0.15, 0.5, 0.85)]
    r_low, r_high = rc_bounds
    if r_high <= r_low:
        rcs = [rc_value * f for f in (0.8, 1.0, 1.25)] if rc_value > 0 else [100.0, 200.0, 400.0]
    else:
        rcs = [r_low + (r_high - r_low) * q for q in (0.15, 0.5, 0.85)]
    grid = [(i, j) for i in range(3) for j in range(3) if (i, j) not in ((0, 2), (2, 0))]
    return [{"cc": ccs[i], "rc": rcs[j]} for i, j in grid]


@dataclass(frozen=True)
class TwoElementMap(LoopGainMap):
    """One corner's loop gain as a function of (Cc, Rc) from seven samples, exact when
    the node between Rc and Cc has other connections.

    Attributes
    ----------
    frequency_hz
        The analysis frequencies, Hz.
    samples
        The (Cc in F, Rc in Ω) the corner was simulated at (seven).
    inverse_return
        u = 1/(1 + T) at each sample: shape (7, n_frequencies), complex.
    """

    frequency_hz: np.ndarray
    samples: tuple[tuple[float, float], ...]
    inverse_return: np.ndarray

    @classmethod
    def from_loop_gains(cls, samples, responses: list[FrequencyResponse]) -> TwoElementMap:
        """Build the map from seven simulated loop gains.

        Parameters
        ----------
        samples
            Seven (Cc in farads, Rc in ohms) pairs, with at least two different values of
            each (:func:`two_element_samples`).
        responses
            The loop gain simulated at each sample, in the same order, on one frequency
            grid.

        Raises
        ------
        ValueError
            For other than seven samples, too few distinct values, or different grids.
        """
        if len(samples) != TWO_ELEMENT_SAMPLES or len(responses) != TWO_ELEMENT_SAMPLES:
            raise ValueError("a two-element map needs exactly seven samples")
        if len({cc for cc, _ in samples}) < 2 or len({rc for _, rc in samples}) < 2:
            raise ValueError("the samples must differ in Cc and in Rc")
        frequency = responses[0].frequency_hz
        for response in responses[1:]:
            if response.frequency_hz.shape != frequency.shape or not np.allclose(
                    response.frequency_hz, frequency, rtol=1e-12):
                raise ValueError("the samples must share one frequency grid")
        u = np.stack([1.0 / (1.0 + r.values) for r in responses])
        return cls(frequency_hz=frequency, samples=tuple(samples), inverse_return=u)

    def _scales(self) -> tuple[float, float]:
        """(R0 in Ω, C0 in F): typical Rc and Cc of the samples, to scale the unknowns."""
        rcs = np.array([rc for _, rc in self.samples], dtype=float)
        ccs = np.array([cc for cc, _ in self.samples], dtype=float)
        r0 = float(np.mean(np.abs(rcs))) or 1.0
        return r0, float(np.exp(np.mean(np.log(ccs))))

    def coefficients(self) -> tuple[np.ndarray, np.ndarray]:
        """(n, d): shape (n_frequencies, 4) each, the coefficients of N and D in the
        scaled variables x = Rc/R0 and y = Zc·s·C0 = C0/Cc (real, the same at every
        frequency; the factor s·C0 goes into the coefficients): N = n0 + n1·x + n2·y +
        n3·x·y, D likewise, up to one common factor (the null vector has unit norm)."""
        cached = self.__dict__.get("_coefficients")
        if cached is not None:
            return cached
        r0, c0 = self._scales()
        x = np.array([rc / r0 for _, rc in self.samples])
        y = np.array([c0 / cc for cc, _ in self.samples])
        basis = np.stack([np.ones_like(x), x, y, x * y], axis=1)  # (7, 4), real
        u = self.inverse_return.T  # (n_f, 7)
        scale = np.median(np.abs(u), axis=1, keepdims=True)
        scale = np.where(scale > 0, scale, 1.0)
        rows = np.concatenate([-np.broadcast_to(basis, u.shape + (4,)).astype(complex),
                               (u / scale)[..., None] * basis], axis=2)  # (n_f, 7, 8)
        _, _, vh = np.linalg.svd(rows)
        null = vh[:, -1, :].conj()
        n = null[:, :4]
        d = null[:, 4:] / scale
        result = (n, d)
        object.__setattr__(self, "_coefficients", result)
        return result

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
        n, d = self.coefficients()
        if frequency_index is not None:
            n, d = n[frequency_index], d[frequency_index]
        r0, c0 = self._scales()
        cc = np.asarray(cc_f, dtype=float)[..., None]
        x = np.asarray(rc_ohm, dtype=float)[..., None] / r0
        # multiplied through by Cc/C0 so that Cc = 0 (an open branch) needs no infinity
        k = cc / c0
        with np.errstate(divide="ignore", invalid="ignore"):
            num = (n[:, 0] + n[:, 1] * x) * k + n[:, 2] + n[:, 3] * x
            den = (d[:, 0] + d[:, 1] * x) * k + d[:, 2] + d[:, 3] * x
            return den / num - 1.0
