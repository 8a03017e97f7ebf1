"""The statistics of a measurement's Monte Carlo samples, one set per base corner (and
configuration): the spread of the phase margin, unity-gain frequency and gain margin, how
many samples meet every target, the yield with its 95 % Clopper–Pearson interval, and
whether the target's statistical rule (``sigma`` or ``yield``) holds."""

from __future__ import annotations

from dataclasses import dataclass

from amploop.analysis.statistics import Spread, clopper_pearson, spread
from amploop.spec.limits import Target

__all__ = ["SampleStatistics", "sample_meets", "sample_statistics", "statistical_miss"]


@dataclass(frozen=True)
class SampleStatistics:
    """The statistics of one base corner's samples.

    Attributes
    ----------
    base
        The base corner's name.
    configuration
        The ``[[feedback]]`` configuration; None with a single ``[feedback]``.
    samples
        How many samples there are (measured or not).
    phase_margin_deg, unity_gain_hz, gain_margin_db
        The spread of each figure over the samples that measured (degrees, Hz, dB); None
        when none has it.
    meeting_target
        How many samples are ``ok`` and meet every target (none without a target).
    passed_yield
        ``meeting_target / samples``; None without a target.
    yield_interval_95
        Its 95 % Clopper–Pearson interval (low, high); None without a target.
    sigma
        The target's ``sigma`` (None: none).
    pm_statistic_deg
        The phase margin's mean minus ``sigma`` standard deviations, degrees; None without
        a ``sigma``.
    meets
        Whether the target's statistical rule holds (without one, whether every sample
        meets the target); None without a target.
    target_pm_deg
        The target's phase margin, degrees; None without a target.
    """

    base: str
    configuration: str | None
    samples: int
    phase_margin_deg: Spread | None
    unity_gain_hz: Spread | None
    gain_margin_db: Spread | None
    meeting_target: int
    passed_yield: float | None
    yield_interval_95: tuple[float, float] | None
    sigma: float | None = None
    pm_statistic_deg: float | None = None
    meets: bool | None = None
    target_pm_deg: float | None = None

    @property
    def group(self) -> str:
        """The base corner's name, with ``@configuration`` when it has one."""
        return self.base + ("" if self.configuration is None else f"@{self.configuration}")

    def as_json(self) -> dict:
        """Its entry in results.json's ``statistics``."""
        data = {"base": self.base}
        if self.configuration is not None:
            data["configuration"] = self.configuration
        data.update({
            "samples": self.samples,
            "phase_margin_deg": self.phase_margin_deg and self.phase_margin_deg.as_json(),
            "unity_gain_hz": self.unity_gain_hz and self.unity_gain_hz.as_json(),
            "gain_margin_db": self.gain_margin_db and self.gain_margin_db.as_json(),
            "meeting_target": self.meeting_target,
            "yield": self.passed_yield,
            "yield_interval_95": None if self.yield_interval_95 is None
            else list(self.yield_interval_95),
        })
        if self.sigma is not None:
            data["sigma"] = self.sigma
            data["phase_margin_mean_minus_k_sigma_deg"] = self.pm_statistic_deg
        data["meets_target"] = self.meets
        data["phase_margin_target_deg"] = self.target_pm_deg
        return data


def sample_meets(result, target: Target) -> bool:
    """Whether one sample, ``result`` (a :class:`~amploop.corners.results.CornerResult`), measured ``ok`` and meets the phase margin and the gain-margin
    minimum of ``target`` (a sample without a phase crossover passes the gain margin), and
    the common-mode loop's where measured."""
    if result.status != "ok" or result.margins is None:
        return False
    m = result.margins
    if m.phase_margin_deg is None or m.phase_margin_deg < target.phase_margin_deg:
        return False
    if target.gain_margin_db is not None and m.gain_margin_db is not None \
            and m.gain_margin_db < target.gain_margin_db:
        return False
    cm = result.common_mode
    if cm is not None:
        if target.common_mode_phase_margin_deg is not None and (
                cm.phase_margin_deg is None
                or cm.phase_margin_deg < target.common_mode_phase_margin_deg):
            return False
        if target.common_mode_gain_margin_db is not None and cm.gain_margin_db is not None \
                and cm.gain_margin_db < target.common_mode_gain_margin_db:
            return False
    return True


def sample_statistics(corners: tuple, target: Target | None
                      ) -> list[SampleStatistics]:
    """One :class:`SampleStatistics` per base corner (and configuration) among ``corners``
    (:class:`~amploop.corners.results.CornerResult` objects),
    in the order their first sample comes; ``target`` None gives the spreads only."""
    groups: dict[str, list] = {}
    for c in corners:
        if c.corner.group is not None:
            groups.setdefault(c.corner.group, []).append(c)
    out = []
    for members in groups.values():
        first = members[0].corner
        measured = [c.margins for c in members if c.status == "ok" and c.margins is not None]
        pm = spread(m.phase_margin_deg for m in measured)
        n = len(members)
        passed, share, interval, statistic, meets = 0, None, None, None, None
        sigma = target.sigma if target is not None else None
        if target is not None:
            passed = sum(sample_meets(c, target) for c in members)
            share, interval = passed / n, clopper_pearson(passed, n)
            if sigma is not None:
                statistic = None if pm is None or len(measured) < n else pm.mean - sigma * pm.std
                meets = statistic is not None and statistic >= target.phase_margin_deg
            elif target.yield_fraction is not None:
                meets = interval[0] >= target.yield_fraction
            else:
                meets = passed == n
        out.append(SampleStatistics(
            base=first.sample.base, configuration=first.configuration, samples=n,
            phase_margin_deg=pm, unity_gain_hz=spread(m.unity_gain_hz for m in measured),
            gain_margin_db=spread(m.gain_margin_db for m in measured),
            meeting_target=passed, passed_yield=share, yield_interval_95=interval,
            sigma=sigma, pm_statistic_deg=statistic, meets=meets,
            target_pm_deg=None if target is None else target.phase_margin_deg))
    return out


def statistical_miss(corners: tuple, target: Target) -> str | None:
    """One sentence on which base corner's samples among ``corners`` (corner results) miss
    the statistical rule of ``target`` (its ``sigma`` or ``yield``), with the figure; None
    when every one meets it."""
    missed = []
    for s in sample_statistics(corners, target):
        if s.meets:
            continue
        if s.sigma is not None:
            figure = ("not every sample measured" if s.pm_statistic_deg is None else
                      f"mean − {s.sigma:g}σ of the phase margin is {s.pm_statistic_deg:.2f}°")
            missed.append(f"at {s.group}, {figure}, below the target "
                          f"{target.phase_margin_deg:g}°")
        else:
            low = s.yield_interval_95[0]
            missed.append(f"at {s.group}, {s.meeting_target} of {s.samples} samples meet the "
                          f"target: yield {s.passed_yield:.3f}, lower 95 % bound {low:.4f} "
                          f"< {target.yield_fraction:g}")
    return "; ".join(missed) or None
