"""Margins read off sampled loop gains, against python-control and closed-form results."""

from __future__ import annotations

import math

import control
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from amploop.analysis.loopgain import FrequencyResponse
from amploop.analysis.margins import loop_margins


def sampled(num: list[float], den: list[float], points_per_decade: int = 40,
            start: float = 1.0, stop: float = 1e10) -> tuple[FrequencyResponse, control.TransferFunction]:
    """A transfer function (coefficients in s, highest power first) sampled in Hz."""
    tf = control.tf(num, den)
    decades = math.log10(stop / start)
    f = np.logspace(math.log10(start), math.log10(stop), round(decades * points_per_decade) + 1)
    values = np.polyval(num, 2j * np.pi * f) / np.polyval(den, 2j * np.pi * f)
    return FrequencyResponse(f, values), tf


def poles(a0: float, *pole_hz: float, zero_hz: float | None = None) -> tuple[list, list]:
    """Numerator and denominator of a0·(1 + s/z) / Π(1 + s/p), frequencies in Hz."""
    den = [1.0]
    for p in pole_hz:
        den = np.polymul(den, [1 / (2 * np.pi * p), 1.0])
    num = [a0] if zero_hz is None else list(np.polymul([a0], [1 / (2 * np.pi * zero_hz), 1.0]))
    return list(num), list(den)


CASES = {
    "two poles": poles(1e4, 1e3, 2e7),
    "three poles": poles(3e3, 2e3, 3e7, 1e8),
    "two poles and a zero": poles(1e4, 1e3, 1e7, 5e7, zero_hz=2e7),
    "right-half-plane zero": (list(np.polymul([1e4], [-1 / (2 * np.pi * 3e8), 1.0])),
                              poles(1, 1e3, 2e7)[1]),
}


@pytest.mark.parametrize("name", list(CASES))
@pytest.mark.parametrize("points_per_decade", [20, 40])
def test_margins_agree_with_python_control(name, points_per_decade):
    """Reference: python-control's stability_margins (exact polynomial method on the same
    transfer function, and its FRD method on the same samples): 0.05° and 0.05 dB."""
    num, den = CASES[name]
    response, tf = sampled(num, den, points_per_decade)
    gm, pm, _, w_180, w_c, _ = control.stability_margins(tf)
    ours = loop_margins(response)
    assert ours.phase_margin_deg == pytest.approx(pm, abs=0.05)
    assert ours.unity_gain_hz == pytest.approx(w_c / (2 * np.pi), rel=1e-3)
    if np.isinf(gm):  # no phase crossover: python-control says inf, amploop says None
        assert ours.gain_margin_db is None and ours.phase_crossover_hz is None
    else:
        assert ours.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.05)
        assert ours.phase_crossover_hz == pytest.approx(w_180 / (2 * np.pi), rel=1e-3)
    frd = control.frd(response.values, 2 * np.pi * response.frequency_hz, smooth=True)
    gm_frd, pm_frd, *_ = control.stability_margins(frd)
    assert ours.phase_margin_deg == pytest.approx(pm_frd, abs=0.05)
    if np.isinf(gm):
        assert np.isinf(gm_frd)
    else:
        assert ours.gain_margin_db == pytest.approx(20 * np.log10(gm_frd), abs=0.05)


def test_two_pole_phase_margin_has_the_closed_form():
    """T = A/((1+s/p1)(1+s/p2)): PM = 180° − atan(ft/p1) − atan(ft/p2) at |T(ft)| = 1
    (trigonometry; common practice)."""
    a0, p1, p2 = 1e4, 1e3, 2e7
    response, _ = sampled(*poles(a0, p1, p2))
    ours = loop_margins(response)
    ft = ours.unity_gain_hz
    assert abs(a0 / math.sqrt((1 + (ft / p1) ** 2) * (1 + (ft / p2) ** 2))) == pytest.approx(1, abs=1e-6)
    expected = 180 - math.degrees(math.atan(ft / p1) + math.atan(ft / p2))
    assert ours.phase_margin_deg == pytest.approx(expected, abs=1e-3)
    assert ours.gain_margin_db is None  # two poles never reach −180°
    assert ours.dc_loop_gain_db == pytest.approx(80.0, abs=1e-4)


@pytest.mark.parametrize("k", [1.0, 1.7, 3.0])
def test_a_zero_at_k_times_the_crossover_adds_atan_one_over_k(k):
    """A lone left-half-plane zero at k·ωt adds atan(1/k) of phase at ωt (trigonometry;
    common practice). The loop's gain is scaled so that ωt stays."""
    a0, p1, p2 = 1e4, 1e3, 2e7
    plain, _ = sampled(*poles(a0, p1, p2), points_per_decade=40)
    ft = loop_margins(plain).unity_gain_hz
    lift = math.sqrt(1 + 1 / k**2)  # |1 + j/k|
    num, den = poles(a0 / lift, p1, p2, zero_hz=k * ft)
    with_zero, _ = sampled(num, den, points_per_decade=40)
    m0, m1 = loop_margins(plain), loop_margins(with_zero)
    assert m1.unity_gain_hz == pytest.approx(ft, rel=1e-6)
    assert m1.phase_margin_deg - m0.phase_margin_deg == pytest.approx(
        math.degrees(math.atan(1 / k)), abs=1e-3)


def test_phase_past_minus_180_at_crossover_gives_a_negative_margin():
    """Three coincident poles with gain 1000: phase at crossover is about −253°."""
    response, _tf = sampled(*poles(1e3, 1e4, 1e4, 1e4))
    ours = loop_margins(response)
    ft = ours.unity_gain_hz
    expected = 180 - 3 * math.degrees(math.atan(ft / 1e4))
    assert ours.phase_margin_deg == pytest.approx(expected, abs=1e-3)
    assert ours.phase_margin_deg < 0
    assert ours.gain_margin_db < 0


def test_missing_crossings_are_none_not_numbers():
    response, _ = sampled(*poles(0.5, 1e3))  # |T| < 1 everywhere
    ours = loop_margins(response)
    assert ours.unity_gain_hz is None and ours.phase_margin_deg is None
    assert ours.gain_margin_db is None and ours.phase_crossover_hz is None


def test_every_crossing_is_found_and_the_worst_margin_reported():
    """A resonant loop (Q = 25 at 50 MHz) crossing 0 dB three times, and −180° once: the
    worst of the three phase margins, where python-control's stability_margins (exact
    polynomial method, every crossing: returnall) puts it, within 0.01° and 10 ppm. The
    resonance is 4 % wide, so the loop is sampled at 400 points per decade."""
    w0 = 2 * np.pi * 5e7  # |base| ≈ −20 dB there; a Q of 25 lifts it to about +8 dB
    num, den = poles(1e4, 1e3, 3e7)
    den = list(np.polymul(den, [1 / w0**2, 2 * 0.02 / w0, 1.0]))
    response, tf = sampled(num, den, points_per_decade=400)
    gms, pms, _, w_180s, w_cs, _ = control.stability_margins(tf, returnall=True)
    assert len(pms) == 3 and len(gms) == 1
    ours = loop_margins(response)
    worst = int(np.argmin(pms))
    assert worst != 0  # the worst is not the first crossing
    assert ours.phase_margin_deg == pytest.approx(pms[worst], abs=0.01)
    assert ours.unity_gain_hz == pytest.approx(w_cs[worst] / (2 * np.pi), rel=1e-5)
    assert ours.gain_margin_db == pytest.approx(20 * np.log10(gms[0]), abs=0.01)
    assert ours.phase_crossover_hz == pytest.approx(w_180s[0] / (2 * np.pi), rel=1e-5)


@settings(max_examples=200, deadline=None)
@given(
    a0=st.floats(min_value=30, max_value=1e5),
    p1=st.floats(min_value=10, max_value=1e4),
    ratio=st.floats(min_value=3, max_value=1e5),
    p3_ratio=st.floats(min_value=1.5, max_value=100),
)
def test_three_pole_margins_match_python_control_for_random_loops(a0, p1, ratio, p3_ratio):
    """Random stable and unstable three-pole loops: same answer as python-control."""
    p2 = p1 * ratio
    num, den = poles(a0, p1, p2, p2 * p3_ratio)
    response, tf = sampled(num, den, points_per_decade=40, start=0.1, stop=1e12)
    gm, pm, _, _w_180, w_c, _ = control.stability_margins(tf)
    ours = loop_margins(response)
    # a gain margin on one side only is a disagreement (python-control: inf for none)
    assert (ours.gain_margin_db is None) == (not np.isfinite(gm))
    if ours.gain_margin_db is not None:
        assert ours.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.05)
    if ours.unity_gain_hz is None:
        assert not np.isfinite(w_c) or w_c == 0 or np.isnan(pm)
        return
    wrapped = (ours.phase_margin_deg + 180) % 360 - 180  # python-control wraps to [−180, 180)
    assert wrapped == pytest.approx(pm, abs=0.05)
