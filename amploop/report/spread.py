"""The Monte Carlo pages: one per base corner (and configuration) with samples, the
histograms of its samples' phase margin and unity-gain frequency, the target and the
mean − kσ line (k the target's sigma, else 3), and the yield with its 95 % interval.
Drawn from results.json's ``statistics`` and the samples' corner entries alone."""

from __future__ import annotations

import numpy as np

from amploop.report import style
from amploop.report.pages import footer, new_page
from amploop.spice.units import engineering

__all__ = ["spread_page", "spread_pages"]


def _members(results: dict, entry: dict) -> list[dict]:
    """The corner entries of ``entry``'s samples (results.json's ``corners``)."""
    return [c for c in results.get("corners", [])
            if (c.get("sample") or {}).get("base") == entry["base"]
            and c.get("configuration") == entry.get("configuration")]


def spread_pages(results: dict) -> list[tuple[str, dict]]:
    """(page name, statistics entry) for each base corner with samples in ``results``."""
    pages = []
    for entry in results.get("statistics") or []:
        name = entry["base"] + (f"@{entry['configuration']}" if entry.get("configuration") else "")
        pages.append((name, entry))
    return pages


def spread_page(results: dict, name: str, entry: dict):
    """The page of one base corner's samples: ``entry`` of the ``statistics`` of
    ``results`` (results.json, read), ``name`` the base corner with its configuration."""
    fig = new_page()
    members = _members(results, entry)
    pm = np.array([c["phase_margin_deg"] for c in members if c.get("phase_margin_deg") is not None])
    ugf = np.array([c["unity_gain_hz"] for c in members if c.get("unity_gain_hz") is not None])
    k = entry.get("sigma") or 3.0
    target = entry.get("phase_margin_target_deg")
    fig.suptitle(f"Monte Carlo: {entry['samples']} samples around {name}", x=0.05, ha="left",
                 fontsize=14)
    for position, values, label, unit, bound in (
            (121, pm, "phase margin (°)", "°", target), (122, ugf / 1e6, "unity-gain frequency (MHz)",
                                                          " MHz", None)):
        ax = fig.add_subplot(position)
        if values.size:
            ax.hist(values, bins=max(5, min(40, int(np.sqrt(values.size)) * 2)),
                    color=style.FINAL, alpha=0.8)
            mean, std = float(np.mean(values)), float(np.std(values, ddof=1)) if values.size > 1 else 0.0
            ax.axvline(mean, color=style.MUTED, lw=1.2, label=f"mean {mean:.4g}{unit}")
            ax.axvline(mean - k * std, color=style.SUSPECT, lw=1.5, ls="--",
                       label=f"mean − {k:g}σ {mean - k * std:.4g}{unit}")
            if bound is not None:
                ax.axvline(bound, color=style.LIMIT, lw=2, label=f"target {bound:g}{unit}")
            ax.legend(loc="upper left", fontsize=8)
        else:
            ax.text(0.5, 0.5, "no sample measured", ha="center", transform=ax.transAxes)
        ax.set_xlabel(label)
        ax.set_ylabel("samples")
    lines = []
    pm_stats = entry.get("phase_margin_deg") or {}
    if pm_stats:
        lines.append(f"phase margin: mean {pm_stats['mean']:.2f}°, σ {pm_stats['std']:.3f}°, "
                     f"min {pm_stats['min']:.2f}°, p01 {pm_stats['p01']:.2f}°, "
                     f"p50 {pm_stats['p50']:.2f}°, p99 {pm_stats['p99']:.2f}°")
    ugf_stats = entry.get("unity_gain_hz") or {}
    if ugf_stats:
        lines.append(f"unity-gain frequency: mean {engineering(ugf_stats['mean'], 'Hz')}, "
                     f"min {engineering(ugf_stats['min'], 'Hz')}")
    if entry.get("yield") is not None:
        low, high = entry["yield_interval_95"]
        verdict = {True: "meets the target", False: "misses the target"}.get(
            entry.get("meets_target"), "")
        lines.append(f"{entry['meeting_target']} of {entry['samples']} samples meet every "
                     f"target: yield {entry['yield']:.3f}, 95 % interval [{low:.4f}, {high:.4f}] "
                     f"(Clopper–Pearson); {verdict}")
    for i, line in enumerate(lines):
        fig.text(0.05, 0.14 - 0.028 * i, line, fontsize=10)
    fig.subplots_adjust(left=0.07, right=0.97, top=0.88, bottom=0.28, wspace=0.25)
    footer(fig, "The samples are only as good as the statistical models and spreads they "
           "were drawn from.")
    return fig
