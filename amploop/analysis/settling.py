"""The small-signal step response and settling time from a sampled closed-loop response.

Given the closed-loop response H(j2πf) on the AC sweep's grid (for instance predicted at
any (Cc, Rc) by a :class:`~amploop.analysis.compmap.CompensationMap`, since H is bilinear
in the branch impedance as the loop gain is), this finds the step response without a
transient simulation, in two steps:

1. A rational fit by AAA (Y. Nakatsukasa, O. Sète, L. N. Trefethen, "The AAA algorithm
   for rational approximation", SIAM J. Sci. Comput. 40(3), 2018), on the samples at
   +j2πf and their mirror images at −j2πf with the conjugate values, taking support
   points in conjugate pairs, so that the fit is the response of a real system. Its poles
   are the finite eigenvalues of the barycentric form's arrowhead pencil, its residues
   N(p)/D'(p) (same paper, §2). Poles whose step contribution |r/p| is below 1000 times
   the fit's own largest error (at least 1e-9, at most 1e-5 of max|H|) are dropped: the
   data cannot tell them from its noise, and the fit puts such "Froissart doublets" (same
   paper, §6) anywhere, the right half-plane included.
2. The step response of H(s) = d + Σ r_k/(s − p_k), analytically (partial fractions of
   H(s)/s; e.g. K. Ogata, "Modern Control Engineering", ch. 5):

       y(t) = H(0) + Σ c_k·exp(p_k·t),  c_k = r_k/p_k,  H(0) = d − Σ c_k.

Why a rational fit rather than a numerical inverse transform: the response of a lumped
linear circuit *is* rational, so a fit of modest order reproduces the sweep to its own
accuracy (1e-9 and better on ngspice's AC), and the time response then follows exactly at
any t, including the slow exponential tail of a pole–zero doublet that a settling band of
0.1 % is all about. An inverse Fourier integral on a 40-point-per-decade grid is limited
by the interpolation of H between the samples (about 1e-4 relative), which moves the
time into a 0.1 % band by several percent.

The settling time is timedomain.py's definition (:func:`~amploop.analysis.timedomain.step_metrics`):
the time from the step until the output stays within ``band`` of the output step around
its final value, with the final value H(0), or, over a finite window (as a transient
run), the mean over the window's last 5 %. Pure functions on arrays; no simulator.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import pairwise

import numpy as np
import scipy.linalg

__all__ = ["PoleResidueModel", "aaa_fit", "settling_time", "settling_times"]

#: Step contributions |r/p| below NOISE_FACTOR times the fit's error (relative to max|H|,
#: clipped to [SPURIOUS_MIN, SPURIOUS_MAX]) are fit artefacts, dropped.
NOISE_FACTOR, SPURIOUS_MIN, SPURIOUS_MAX = 1000.0, 1e-9, 1e-5
#: Time samples per period (or per time constant) of the fastest term still above the band.
SAMPLES_PER_PERIOD = 24


@dataclass(frozen=True)
class PoleResidueModel:
    """H(s) = direct + Σ residues_k / (s − poles_k), with s in rad/s.

    Attributes
    ----------
    poles
        Complex poles, rad/s (conjugate pairs for a real system).
    residues
        Their residues, (V/V)·rad/s.
    direct
        The value at infinite frequency, V/V.
    """

    poles: np.ndarray
    residues: np.ndarray
    direct: complex

    def response(self, frequency_hz: np.ndarray) -> np.ndarray:
        """H(j2πf) at ``frequency_hz`` (Hz), complex."""
        s = 2j * np.pi * np.asarray(frequency_hz, dtype=float)[..., None]
        return self.direct + np.sum(self.residues / (s - self.poles), axis=-1)

    @property
    def dc_gain(self) -> float:
        """H(0) = d − Σ r_k/p_k, V/V (real part)."""
        return float(np.real(self.direct - np.sum(self.residues / self.poles)))

    @property
    def stable(self) -> bool:
        """Whether every pole lies in the open left half-plane."""
        return bool(np.all(np.real(self.poles) < 0))

    def step(self, time_s: np.ndarray) -> np.ndarray:
        """The response to a unit step at t = 0, at ``time_s`` (seconds ≥ 0), V/V:
        y(t) = H(0) + Re Σ (r_k/p_k)·exp(p_k·t)."""
        t = np.asarray(time_s, dtype=float)[..., None]
        c = self.residues / self.poles
        return self.dc_gain + np.real(np.sum(c * np.exp(self.poles * t), axis=-1))


def aaa_fit(frequency_hz: np.ndarray, values: np.ndarray, tol: float = 1e-9,
            max_pairs: int = 30) -> PoleResidueModel:
    """A real rational fit of a sampled response H(j2πf) by AAA, as poles and residues.

    Parameters
    ----------
    frequency_hz
        Sample frequencies, Hz, positive.
    values
        H at each, complex (V/V or any unit).
    tol
        Stop when the largest error on the samples is below ``tol``·max|H|, or when three
        more pairs of support points have not halved the error (the data's own noise);
        the fit with the smallest error is kept.
    max_pairs
        At most this many conjugate pairs of support points (the fit's degree is twice
        this, less one).

    Returns
    -------
    PoleResidueModel
    """
    f = np.asarray(frequency_hz, dtype=float)
    h = np.asarray(values, dtype=complex)
    w_ref = 2 * np.pi * f.max()            # z = s/w_ref keeps the numbers near 1
    z_all = np.concatenate([1j * 2 * np.pi * f / w_ref, -1j * 2 * np.pi * f / w_ref])
    h_all = np.concatenate([h, np.conj(h)])
    n = f.size
    scale = np.abs(h).max()
    free = np.ones(2 * n, dtype=bool)
    support: list[int] = []
    fitted = np.full(2 * n, np.mean(h.real), dtype=complex)
    best = (np.inf, 0, np.zeros(0, dtype=complex))  # (error, support points, weights)
    for _ in range(max_pairs):
        j = int(np.argmax(np.where(free[:n], np.abs(h_all[:n] - fitted[:n]), -1.0)))
        support += [j, j + n]
        free[[j, j + n]] = False
        zs, hs = z_all[support], h_all[support]
        with np.errstate(divide="ignore", invalid="ignore"):
            cauchy = 1.0 / (z_all[:, None] - zs[None, :])
        loewner = (h_all[free, None] - hs[None, :]) * cauchy[free]
        weights = np.conj(np.linalg.svd(loewner, full_matrices=False)[2][-1])
        fitted = h_all.copy()
        fitted[free] = (cauchy[free] @ (weights * hs)) / (cauchy[free] @ weights)
        error = np.abs(fitted - h_all).max() / scale
        if error < 0.5 * best[0]:
            best = (error, len(support), weights)
        elif len(support) - best[1] >= 6:
            break                           # three pairs without gain: the data's noise floor
        if error <= tol:
            break
    support = support[:best[1]]
    weights = best[2]
    spurious = min(max(NOISE_FACTOR * best[0], SPURIOUS_MIN), SPURIOUS_MAX) * scale
    return _poles_residues(z_all[support], h_all[support], weights, w_ref, spurious)


def _poles_residues(zs, hs, weights, w_ref, spurious) -> PoleResidueModel:
    """Poles, residues and direct term of the barycentric form Σ w f/(z−z_j) / Σ w/(z−z_j),
    in s = w_ref·z; terms with |r/p| ≤ ``spurious`` dropped, far poles folded into the
    direct term."""
    m = zs.size
    e = np.zeros((m + 1, m + 1), dtype=complex)
    e[0, 1:] = weights
    e[1:, 0] = 1.0
    e[1:, 1:] = np.diag(zs)
    b = np.eye(m + 1)
    b[0, 0] = 0.0
    eig = scipy.linalg.eigvals(e, b)
    poles = eig[np.isfinite(eig)]
    poles = poles[np.abs(poles) < 1e8]      # the pencil's infinite eigenvalues, numerically
    d = np.sum(weights * hs) / np.sum(weights)
    diff = poles[:, None] - zs[None, :]
    residues = np.sum(weights * hs / diff, axis=1) / -np.sum(weights / diff**2, axis=1)
    contribution = np.abs(residues / poles)
    keep = contribution > spurious
    far = keep & (np.abs(poles) > 100.0)    # beyond 100× the top frequency: a constant there
    d = d - np.sum(residues[far] / poles[far])
    keep &= ~far
    return PoleResidueModel(poles=poles[keep] * w_ref, residues=residues[keep] * w_ref,
                            direct=complex(d))


def _time_grid(c: np.ndarray, p: np.ndarray, threshold: float, t_end: float) -> np.ndarray:
    """Time samples on [0, t_end] fine enough for every term while it still matters.

    Term k is resolved with SAMPLES_PER_PERIOD samples per period 2π/|Im p| (or per time
    constant) until it falls below ``threshold``/n for good (t_k = ln(n|c_k|/threshold)/|Re p|),
    and nowhere coarser than t_end/4000 (a slow term's change over the window matters
    when the final value is the window's mean, as a transient's step of t_end/4000 does).
    """
    sigma = -np.real(p)
    t_k = np.log(np.maximum(c.size * np.abs(c) / threshold, 1.0)) / sigma
    step_k = np.minimum(2 * np.pi / np.maximum(np.abs(np.imag(p)), 1e-300), 1 / sigma)
    step_k = step_k / SAMPLES_PER_PERIOD
    edges = np.unique(np.concatenate([[0.0], np.minimum(t_k, t_end), [t_end]]))
    pieces = []
    for a, b_ in pairwise(edges):
        live = t_k > a
        dt = min(step_k[live].min(initial=np.inf), t_end / 4000)
        pieces.append(np.linspace(a, b_, max(int(np.ceil((b_ - a) / dt)), 1) + 1)[:-1])
    return np.concatenate(pieces + [[t_end]])


def _without_harmless_poles(model: PoleResidueModel, band: float,
                            window_s: float) -> PoleResidueModel:
    """``model`` without the right-half-plane terms c·e^{pt} (c = r/p) that stay below
    band/1000 of the response's scale (the largest |c|, or |H(0)|) over [0, ``window_s``]."""
    c = model.residues / model.poles
    scale = max(abs(model.dc_gain), float(np.max(np.abs(c), initial=0.0)))
    growth = np.exp(np.clip(np.real(model.poles), 0.0, None) * window_s)
    harmless = (np.real(model.poles) > 0) & (np.abs(c) * growth < 1e-3 * band * scale)
    return PoleResidueModel(poles=model.poles[~harmless], residues=model.residues[~harmless],
                            direct=model.direct)


def settling_time(model: PoleResidueModel, band: float = 1e-3,
                  window_s: float | None = None) -> float | None:
    """Time, seconds, from a step until the response stays within ``band`` of the step.

    The definition of :func:`~amploop.analysis.timedomain.step_metrics`: the excursion
    e(t) = |y(t) − y_final|/|y_final − y(0⁻)| (y(0⁻) = 0) last exceeds ``band`` at the
    settling time. Found on a time grid (:func:`_time_grid`) and refined by bisection on
    the exact y(t).

    Parameters
    ----------
    model
        The closed-loop response as poles and residues (:func:`aaa_fit`).
    band
        Settling band relative to the output step (0.001 = 0.1 %).
    window_s
        None: y_final = H(0), the response is followed as long as any term matters.
        A length in seconds: the response is followed over [0, window_s] only, and
        y_final is its mean over the last 5 % of it, as a transient run of that length
        after the step reads it (this includes, e.g., the slow droop of a capacitive
        feedback network whose DC path sets H(0) = 0).

    Returns
    -------
    float or None
        None when the response does not settle: an unstable pole, or (with a window) still
        outside the band at the window's end. With a window, a right-half-plane pole whose
        term stays below a thousandth of the band over the whole window (a fit's artefact
        near DC, where the samples barely tell it from a pole at the origin) is left out.
    """
    if window_s is not None and not model.stable:
        model = _without_harmless_poles(model, band, float(window_s))
    if not model.stable:
        return None
    p, c = model.poles, model.residues / model.poles
    if window_s is None:
        final = model.dc_gain
        if final == 0 or p.size == 0:
            return None if final == 0 else 0.0
        # beyond t_hi the sum of the terms' envelopes is below the band for good
        t_hi = float(np.max(np.log(np.maximum(p.size * np.abs(c) / (band * abs(final)), 1.0))
                            / -np.real(p), initial=0.0))
    else:
        t_hi = float(window_s)
        t1 = 0.95 * t_hi
        final = model.dc_gain + float(np.real(np.sum(
            c * (np.exp(p * t_hi) - np.exp(p * t1)) / (p * (t_hi - t1)))))
        if final == 0:
            return None
    if t_hi == 0.0:
        return 0.0

    def excursion(t):
        return np.abs(model.step(t) - final) / abs(final)

    t = _time_grid(c, p, band * abs(final), t_hi)
    outside = np.nonzero(excursion(t) > band)[0]
    if outside.size == 0:
        return 0.0
    last = int(outside[-1])
    if last + 1 >= t.size:
        return None
    lo, hi = t[last], t[last + 1]
    for _ in range(50):
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if excursion(mid) > band else (lo, mid)
    return float(0.5 * (lo + hi))


def settling_times(frequency_hz: np.ndarray, responses: np.ndarray, band: float = 1e-3,
                   window_s: float | None = None, tol: float = 1e-9) -> np.ndarray:
    """Settling times, seconds, of many sampled closed-loop responses (NaN: does not settle).

    Parameters
    ----------
    frequency_hz
        The sweep's frequencies, Hz.
    responses
        H(j2πf) per point: shape ``(..., n_frequencies)``, complex (for instance
        :meth:`~amploop.analysis.compmap.CompensationMap.loop_gain_values` of a map built
        from three closed-loop responses, on a grid of (Cc, Rc)).
    band, window_s
        As for :func:`settling_time`.
    tol
        The fit's tolerance (:func:`aaa_fit`).

    Returns
    -------
    numpy.ndarray
        Shape ``responses.shape[:-1]``.
    """
    h = np.asarray(responses, dtype=complex)
    out = np.full(h.shape[:-1], np.nan)
    for index in np.ndindex(out.shape):
        value = settling_time(aaa_fit(frequency_hz, h[index], tol), band, window_s)
        out[index] = np.nan if value is None else value
    return out
