"""Statistics of Monte Carlo samples: the spread of a figure, the yield and its confidence
interval, and the statistical rules a target holds samples to. Pure functions on numbers.

Sources: the sample mean and the sample standard deviation with Bessel's correction
(ddof = 1); quantiles by linear interpolation between order statistics (numpy's default,
Hyndman & Fan, The American Statistician 50, 1996, definition 7); the exact binomial
interval of Clopper & Pearson (Biometrika 26, 1934), from the beta distribution's
quantiles (scipy.stats.beta).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["Spread", "clopper_pearson", "fewest_passing", "mean_minus_k_sigma", "spread"]


@dataclass(frozen=True)
class Spread:
    """The spread of one figure over the samples (in the figure's own unit).

    Attributes
    ----------
    mean, std
        The sample mean and the sample standard deviation (ddof = 1).
    min
        The smallest value.
    p01, p50, p99
        The 1st, 50th and 99th percentiles (linear interpolation).
    count
        How many values there were.
    """

    mean: float
    std: float
    min: float
    p01: float
    p50: float
    p99: float
    count: int

    def as_json(self) -> dict:
        """Its entry in results.json: ``mean``, ``std``, ``min``, ``p01``, ``p50``, ``p99``."""
        return {"mean": self.mean, "std": self.std, "min": self.min, "p01": self.p01,
                "p50": self.p50, "p99": self.p99}


def spread(values) -> Spread | None:
    """The :class:`Spread` of the finite ``values``; None when there are none (the standard
    deviation is NaN for a single value)."""
    data = np.asarray([v for v in values if v is not None], dtype=float)
    data = data[np.isfinite(data)]
    if data.size == 0:
        return None
    p01, p50, p99 = np.percentile(data, [1.0, 50.0, 99.0])
    std = float(np.std(data, ddof=1)) if data.size > 1 else math.nan
    return Spread(mean=float(np.mean(data)), std=std, min=float(np.min(data)),
                  p01=float(p01), p50=float(p50), p99=float(p99), count=int(data.size))


def mean_minus_k_sigma(values, k: float, axis: int = 0):
    """The mean of ``values`` less ``k`` sample standard deviations (ddof = 1), along
    ``axis`` (an array for an array of samples at many points)."""
    data = np.asarray(values, dtype=float)
    return np.mean(data, axis=axis) - k * np.std(data, axis=axis, ddof=1)


def clopper_pearson(passed: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """The exact (Clopper–Pearson) two-sided ``confidence`` interval of a binomial share
    from ``passed`` successes in ``total`` trials: the α/2 quantile of Beta(k, n − k + 1)
    and the 1 − α/2 quantile of Beta(k + 1, n − k), with 0 and 1 at the ends (k = 0, k = n).
    The same as ``scipy.stats.binomtest(k, n).proportion_ci(confidence, "exact")``."""
    from scipy.stats import beta

    if total <= 0 or not 0 <= passed <= total:
        raise ValueError(f"need 0 <= passed <= total and total > 0, got {passed} of {total}")
    alpha = 1.0 - confidence
    low = 0.0 if passed == 0 else float(beta.ppf(alpha / 2, passed, total - passed + 1))
    high = 1.0 if passed == total else float(beta.ppf(1 - alpha / 2, passed + 1, total - passed))
    return low, high


def fewest_passing(total: int, share: float, confidence: float = 0.95) -> int | None:
    """The fewest of ``total`` samples that must pass for the lower end of the two-sided
    ``confidence`` :func:`clopper_pearson` interval to reach ``share``; None when even all of them do not
    suffice. The lower end grows with the count passing, so a bisection finds it."""
    if clopper_pearson(total, total, confidence)[0] < share:
        return None
    low, high = 0, total  # high reaches the share; low, with its lower end 0, does not
    while high - low > 1:
        middle = (low + high) // 2
        if clopper_pearson(middle, total, confidence)[0] >= share:
            high = middle
        else:
            low = middle
    return high
