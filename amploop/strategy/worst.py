"""The worst corner of one point and the target it is held to: the smallest phase margin,
unity-gain frequency and gain margin over the corners, whether they meet the target, and
the one-line reason when they do not (naming the target missed and the corner)."""

from __future__ import annotations

from dataclasses import dataclass

from amploop.corners.results import CornerResult
from amploop.spec.model import Target
from amploop.spice.labels import PHASE_MARGIN_CORNER, UNITY_GAIN_CORNER

__all__ = ["WorstCase", "corner_shortfall", "meets_target", "missed_target", "worst_case"]


@dataclass(frozen=True)
class WorstCase:
    """The worst corner figures of one point.

    Attributes
    ----------
    phase_margin_deg
        The smallest phase margin over the corners.
    unity_gain_hz
        The smallest unity-gain frequency over the corners (the bandwidth that is sure).
    gain_margin_db
        The smallest gain margin, None when no corner reaches −180°.
    phase_margin_corner
        The corner with the smallest phase margin (the report's limiting corner).
    unity_gain_corner
        The corner with the smallest unity-gain frequency.
    """

    phase_margin_deg: float
    unity_gain_hz: float
    gain_margin_db: float | None
    phase_margin_corner: str
    unity_gain_corner: str

    def as_json(self) -> dict:
        """The ``worst`` block of results.json (and of ``measure --json``)."""
        return {"phase_margin_deg": self.phase_margin_deg, "unity_gain_hz": self.unity_gain_hz,
                "gain_margin_db": self.gain_margin_db,
                PHASE_MARGIN_CORNER: self.phase_margin_corner,
                UNITY_GAIN_CORNER: self.unity_gain_corner}


def worst_case(corners: tuple[CornerResult, ...]) -> WorstCase | None:
    """The worst figures over ``corners`` (one point's results), or None if there are none or
    any corner did not measure."""
    if not corners or any(c.status != "ok" or c.margins is None for c in corners):
        return None
    by_pm = min(corners, key=lambda c: c.margins.phase_margin_deg)
    by_ugf = min(corners, key=lambda c: c.margins.unity_gain_hz)
    gms = [c.margins.gain_margin_db for c in corners if c.margins.gain_margin_db is not None]
    return WorstCase(
        phase_margin_deg=float(by_pm.margins.phase_margin_deg),
        unity_gain_hz=float(by_ugf.margins.unity_gain_hz),
        gain_margin_db=min(gms) if gms else None,
        phase_margin_corner=by_pm.corner.name,
        unity_gain_corner=by_ugf.corner.name,
    )


def meets_target(worst: WorstCase | None, target: Target) -> bool:
    """Whether ``worst`` has its phase margin at or above that of ``target`` and its gain
    margin at or above the target's minimum (a point without a gain margin passes that);
    False when ``worst`` is None."""
    if worst is None or worst.phase_margin_deg < target.phase_margin_deg:
        return False
    if target.gain_margin_db is not None and worst.gain_margin_db is not None:
        return worst.gain_margin_db >= target.gain_margin_db
    return True


def _below(value: float, bound: float, unit: str) -> str:
    """``value`` with as many decimals (2 to 6) as it takes to read below ``bound``."""
    for decimals in range(2, 7):
        text = f"{value:.{decimals}f}"
        if float(text) < bound:
            break
    return f"{text}{unit}"


def corner_shortfall(corner: CornerResult, target: Target) -> str | None:
    """What one measured corner misses of ``target``, e.g. ``"GM 9.9956 dB < 10 dB"``;
    None when it meets it or did not measure.

    Parameters
    ----------
    corner
        One corner's result.
    target
        The phase margin (degrees) and the minimum gain margin (dB) every corner must reach.
    """
    m = corner.margins
    if corner.status != "ok" or m is None:
        return None
    missed = []
    if m.phase_margin_deg is not None and m.phase_margin_deg < target.phase_margin_deg:
        missed.append(f"PM {_below(m.phase_margin_deg, target.phase_margin_deg, '°')} "
                      f"< {target.phase_margin_deg:g}°")
    if target.gain_margin_db is not None and m.gain_margin_db is not None and \
            m.gain_margin_db < target.gain_margin_db:
        missed.append(f"GM {_below(m.gain_margin_db, target.gain_margin_db, ' dB')} "
                      f"< {target.gain_margin_db:g} dB")
    return ", ".join(missed) or None


def missed_target(corners: tuple[CornerResult, ...], target: Target) -> str | None:
    """One sentence on which target the verified corners miss, naming the margin and the
    corner; None when every corner meets it.

    Parameters
    ----------
    corners
        One point's verified results, one per corner.
    target
        The phase margin (degrees) and the minimum gain margin (dB) every corner must reach.
    """
    measured = [c for c in corners if c.status == "ok" and c.margins is not None]
    missed = []
    for what, attribute, bound, unit in (
            ("phase margin", "phase_margin_deg", target.phase_margin_deg, "°"),
            ("gain margin", "gain_margin_db", target.gain_margin_db, " dB")):
        have = [c for c in measured if getattr(c.margins, attribute) is not None]
        if bound is None or not have:
            continue
        worst = min(have, key=lambda c: getattr(c.margins, attribute))
        value = getattr(worst.margins, attribute)
        if value < bound:
            missed.append(f"the verified {what} {_below(value, bound, unit)} at corner "
                          f"{worst.corner.name} misses the target {bound:g}{unit}")
    return "; ".join(missed) or None
