"""Where the map strategies take their first samples of the loop gain: three Cc values
across the bounds, then three more around a chosen point (the map is bilinear in the
branch impedance, so three points fix it at each corner)."""

from __future__ import annotations

import math

__all__ = ["initial_samples", "samples_around"]


def initial_samples(cc_bounds: tuple[float, float], rc_value: float) -> list[dict[str, float]]:
    """Three Cc values spread over the bounds at one Rc.

    Parameters
    ----------
    cc_bounds
        (min, max) of Cc, farads: the samples sit at 15, 50 and 85 % of the way from one
        to the other on a log scale; at 0.8, 1 and 1.25 times the lower bound when the
        bounds are equal.
    rc_value
        The Rc of all three, ohms (or the size of a device standing in for Rc).
    """
    low, high = cc_bounds
    if high <= low:
        centre = low
        return [{"cc": centre * f, "rc": rc_value} for f in (0.8, 1.0, 1.25)]
    span = math.log(high / low)
    return [{"cc": low * math.exp(span * q), "rc": rc_value} for q in (0.15, 0.5, 0.85)]


def samples_around(cc: float, rc: float, cc_bounds) -> list[dict[str, float]]:
    """Three Cc values close around the point (``cc`` farads, ``rc`` ohms or device size):
    ±20 % in Cc at the same ``rc``, kept inside ``cc_bounds`` (min, max; farads)."""
    low, high = cc_bounds
    values = []
    for factor in (0.8, 1.0, 1.25):
        values.append(min(max(cc * factor, low), high))
    if len(set(values)) < 3:  # squeezed against a bound
        values = [cc, cc * 1.1, cc * 1.21] if cc * 1.21 <= high else [cc / 1.21, cc / 1.1, cc]
    return [{"cc": v, "rc": rc} for v in values]
