"""The worst corner of one point and the target it is held to: the smallest phase margin,
unity-gain frequency and gain margin over the corners, whether they meet the target, and
the one-line reason when they do not (naming the target missed and the corner)."""

from __future__ import annotations

from dataclasses import dataclass, replace

from amploop.corners.results import CornerResult
from amploop.spec.limits import Target
from amploop.spice.labels import COMMON_MODE, PHASE_MARGIN_CORNER, UNITY_GAIN_CORNER
from amploop.spice.units import engineering

__all__ = ["WorstCase", "corner_shortfall", "limiting_loop", "meets_target", "missed_settling",
           "missed_target", "settling_text", "worst_case", "worst_text"]


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
    common_mode
        The same figures of a fully-differential amplifier's common-mode loop; None when
        that loop is not measured.
    """

    phase_margin_deg: float
    unity_gain_hz: float
    gain_margin_db: float | None
    phase_margin_corner: str
    unity_gain_corner: str
    common_mode: WorstCase | None = None

    def as_json(self) -> dict:
        """The ``worst`` block of results.json (and of ``measure --json``); a
        fully-differential amplifier's has its common-mode loop's in ``common_mode``."""
        data = {"phase_margin_deg": self.phase_margin_deg, "unity_gain_hz": self.unity_gain_hz,
                "gain_margin_db": self.gain_margin_db,
                PHASE_MARGIN_CORNER: self.phase_margin_corner,
                UNITY_GAIN_CORNER: self.unity_gain_corner}
        if self.common_mode is not None:
            data[COMMON_MODE] = self.common_mode.as_json()
        return data


def worst_case(corners: tuple[CornerResult, ...]) -> WorstCase | None:
    """The worst figures over ``corners`` (one point's results), or None if there are none or
    any corner did not measure."""
    if not corners or any(c.status != "ok" or c.margins is None for c in corners):
        return None
    common_mode = None
    if all(c.common_mode is not None for c in corners):
        common_mode = _worst_of([(c.corner.name, c.common_mode) for c in corners])
    return replace(_worst_of([(c.corner.name, c.margins) for c in corners]),
                   common_mode=common_mode)


def _worst_of(named: list) -> WorstCase:
    """The worst of ``named``, (corner name, :class:`~amploop.analysis.margins.Margins`)
    pairs with a phase margin and a unity-gain frequency each."""
    by_pm = min(named, key=lambda n: n[1].phase_margin_deg)
    by_ugf = min(named, key=lambda n: n[1].unity_gain_hz)
    gms = [m.gain_margin_db for _, m in named if m.gain_margin_db is not None]
    return WorstCase(phase_margin_deg=float(by_pm[1].phase_margin_deg),
                     unity_gain_hz=float(by_ugf[1].unity_gain_hz),
                     gain_margin_db=min(gms) if gms else None,
                     phase_margin_corner=by_pm[0], unity_gain_corner=by_ugf[0])


def limiting_loop(worst: WorstCase, target: Target | None) -> str:
    """Which loop of ``worst`` limits: ``"common_mode"`` when its phase margin has less slack
    over its ``target`` than the main loop's over the main target (less margin, without
    targets: ``target`` None), else ``"main"``."""
    cm = worst.common_mode
    if cm is None:
        return "main"
    main_bound = target.phase_margin_deg if target else 0.0
    cm_bound = target.common_mode_phase_margin_deg if target else 0.0
    if cm_bound is None:
        return "main"
    slack_cm = cm.phase_margin_deg - cm_bound
    return "common_mode" if slack_cm < worst.phase_margin_deg - main_bound else "main"


def worst_text(worst: WorstCase, target: Target | None = None) -> str:
    """``worst`` in words: ``worst-corner phase margin 61.88° (corner X)``, and for a
    fully-differential amplifier the common-mode loop's, the limiting loop named (by
    :func:`limiting_loop` against ``target``)."""
    text = (f"worst-corner phase margin {worst.phase_margin_deg:.2f}° "
            f"(corner {worst.phase_margin_corner})")
    cm = worst.common_mode
    if cm is None:
        return text
    limits = limiting_loop(worst, target)
    return (f"{text}{' ' if limits == 'common_mode' else ', the limiting loop, '}and "
            f"common-mode {cm.phase_margin_deg:.2f}° (corner {cm.phase_margin_corner})"
            + (", the limiting loop," if limits == "common_mode" else ""))


def meets_target(worst: WorstCase | None, target: Target) -> bool:
    """Whether ``worst`` has its phase margin at or above that of ``target`` and its gain
    margin at or above the target's minimum (a point without a gain margin passes that);
    False when ``worst`` is None."""
    if worst is None or worst.phase_margin_deg < target.phase_margin_deg:
        return False
    if target.gain_margin_db is not None and worst.gain_margin_db is not None \
            and worst.gain_margin_db < target.gain_margin_db:
        return False
    cm = worst.common_mode
    if cm is None:
        return True
    if target.common_mode_phase_margin_deg is not None \
            and cm.phase_margin_deg < target.common_mode_phase_margin_deg:
        return False
    return not (target.common_mode_gain_margin_db is not None and cm.gain_margin_db is not None
                and cm.gain_margin_db < target.common_mode_gain_margin_db)


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
    if corner.status != "ok" or corner.margins is None:
        return None
    missed = []
    for prefix, m, pm_bound, gm_bound in _loops(corner, target):
        if m is None:
            continue
        if pm_bound is not None and m.phase_margin_deg is not None \
                and m.phase_margin_deg < pm_bound:
            missed.append(f"{prefix}PM {_below(m.phase_margin_deg, pm_bound, '°')} "
                          f"< {pm_bound:g}°")
        if gm_bound is not None and m.gain_margin_db is not None and m.gain_margin_db < gm_bound:
            missed.append(f"{prefix}GM {_below(m.gain_margin_db, gm_bound, ' dB')} "
                          f"< {gm_bound:g} dB")
    return ", ".join(missed) or None


def _loops(corner: CornerResult, target: Target) -> list[tuple]:
    """(prefix, margins, phase-margin bound, gain-margin bound) of each loop of ``corner``
    that ``target`` holds: the main loop, and the common-mode loop (``CM``) when measured."""
    loops = [("", corner.margins, target.phase_margin_deg, target.gain_margin_db)]
    if corner.common_mode is not None:
        loops.append(("CM ", corner.common_mode, target.common_mode_phase_margin_deg,
                      target.common_mode_gain_margin_db))
    return loops


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
    for what, loop, attribute, bound, unit in (
            ("phase margin", "margins", "phase_margin_deg", target.phase_margin_deg, "°"),
            ("gain margin", "margins", "gain_margin_db", target.gain_margin_db, " dB"),
            ("common-mode phase margin", "common_mode", "phase_margin_deg",
             target.common_mode_phase_margin_deg, "°"),
            ("common-mode gain margin", "common_mode", "gain_margin_db",
             target.common_mode_gain_margin_db, " dB")):
        have = [(c, getattr(c, loop)) for c in measured if getattr(c, loop) is not None
                and getattr(getattr(c, loop), attribute) is not None]
        if bound is None or not have:
            continue
        worst, margins = min(have, key=lambda pair: getattr(pair[1], attribute))
        value = getattr(margins, attribute)
        if value < bound:
            missed.append(f"the verified {what} {_below(value, bound, unit)} at corner "
                          f"{worst.corner.name} misses the target {bound:g}{unit}")
    return "; ".join(missed) or None


def _slowest(checks: dict) -> tuple[str, float | None] | None:
    """(corner, simulated settling time in seconds, None: not settled) of the slowest step
    check in ``checks`` (corner name -> StepCheck); None when there are none."""
    times = {n: (c.metrics.settling_s if c.metrics is not None else None)
             for n, c in checks.items()}
    if not times:
        return None
    name = max(times, key=lambda n: float("inf") if times[n] is None else times[n])
    return name, times[name]


def settling_text(checks: dict) -> str:
    """``", worst-corner settling 35.1 ns (corner X)"`` from the step checks ``checks``
    (corner name -> StepCheck); empty without any."""
    slowest = _slowest(checks)
    if slowest is None:
        return ""
    name, value = slowest
    shown = "not settled in its run" if value is None else engineering(value, "s")
    return f", worst-corner settling {shown} (corner {name})"


def missed_settling(checks: dict, target: Target) -> str | None:
    """One sentence on the settling ceiling the simulated step checks miss, naming the
    corner; None when every corner settles within it (or there is no ceiling).

    Parameters
    ----------
    checks
        Corner name -> :class:`~amploop.corners.stepcheck.StepCheck` at the verified point.
    target
        Its ``settling_time_s`` is the ceiling, seconds.
    """
    ceiling = target.settling_time_s
    slowest = _slowest(checks)
    if ceiling is None or slowest is None:
        return None
    name, value = slowest
    if value is not None and value <= ceiling:
        return None
    shown = "does not settle within its run" if value is None else \
        f"settling time {engineering(value, 's', 4)}"
    return (f"the verified {shown} at corner {name} misses the target "
            f"{engineering(ceiling, 's')}")
