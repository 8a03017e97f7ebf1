"""``[monte_carlo]``: Monte Carlo samples as a kind of corner set.

Each base corner is replaced, where it stands in the corner list, by ``samples`` corners
named ``<base>#<k>`` (k from 0). Sample k carries the parameters amploop drew for it
(normal, from ``seed``) merged into its base corner's ``params``, and an ngspice random
seed for the statistical functions (``agauss`` & co.) of the models file; with ``lib`` it
reads that section in place of its base's. The expansion comes before the ``[[feedback]]``
configurations, so every sample runs in every configuration (``<base>#<k>@<configuration>``).

Sample k of every base corner gets the same standard-normal draws and the same ngspice
seed: one die, seen at each base corner, so that two base corners' statistics differ only
by what the base corners themselves change.
"""

from __future__ import annotations

import math
from dataclasses import replace

from amploop.errors import did_you_mean
from amploop.spec.model import Corner, MonteCarlo, Sample
from amploop.spec.reader import Reader, key_path
from amploop.spice.expressions import PARAM_NAME

__all__ = ["MAX_SAMPLES", "expand_samples", "read_monte_carlo", "samples_for_yield"]

_KEYS = {"samples", "seed", "base", "lib", "params"}
_PARAM_KEYS = {"sigma", "relative"}

#: More samples per base corner than this are refused before anything is simulated.
MAX_SAMPLES = 10_000

#: ngspice's seeds are drawn from 1 to this (a C int).
_SEED_RANGE = 2**31 - 1


def samples_for_yield(share: float, confidence: float = 0.95) -> int:
    """The fewest samples whose two-sided ``confidence`` Clopper–Pearson interval can have
    its lower end at ``share`` or above: with every one of n samples passing, the lower end
    is ``((1 − confidence)/2)^(1/n)`` (Clopper & Pearson, Biometrika 26, 1934; the k = n case
    of the beta quantile), so n ≥ ln((1 − confidence)/2) / ln(share)."""
    return math.ceil(math.log((1 - confidence) / 2) / math.log(share) - 1e-12)


def read_monte_carlo(r: Reader, data: dict, yield_fraction: float | None = None
                     ) -> MonteCarlo | None:
    """The ``[monte_carlo]`` table of the job table ``data``, read with ``r``; None when
    absent. ``yield_fraction`` is ``[target].yield`` (None: none), whose bound the sample
    count must be able to reach."""
    table = r.table(data, "monte_carlo", "[monte_carlo]", required=False)
    if not table:
        return None
    place = "[monte_carlo]"
    r.known(table, _KEYS, place)
    samples = table.get("samples")
    if not isinstance(samples, int) or isinstance(samples, bool):
        raise r.fail(f"{place}.samples", "expected a whole number of samples per base corner")
    if samples < 2:
        raise r.fail(f"{place}.samples", f"needs at least 2 samples for a spread, got {samples}")
    if samples > MAX_SAMPLES:
        raise r.fail(f"{place}.samples", f"{samples} samples per base corner would cost "
                     f"{samples} AC analyses each to measure and about {4 * samples} each to "
                     f"tune; at most {MAX_SAMPLES} are allowed",
                     hint="a few hundred samples give the mean and sigma to a few per cent")
    seed = table.get("seed", 1)
    if not isinstance(seed, int) or isinstance(seed, bool) or not 0 <= seed < 2**63:
        raise r.fail(f"{place}.seed", "expected a whole number from 0")
    base = table.get("base")
    if base is not None:
        if not isinstance(base, list) or not base or not all(isinstance(b, str) for b in base):
            raise r.fail(f"{place}.base", "expected a non-empty list of corner names")
        base = tuple(base)
    lib = r.string(table, "lib", place, required=False)
    params: dict[str, tuple[float, bool]] = {}
    given = table.get("params", {})
    if not isinstance(given, dict):
        raise r.fail(f"{place}.params", "expected a table of name = { sigma = ... }")
    for name, spec in given.items():
        where = f"{place}.params.{key_path(name)}"
        if not PARAM_NAME.fullmatch(name):
            raise r.fail(where, "not a valid SPICE parameter name")
        if not isinstance(spec, dict) or "sigma" not in spec:
            raise r.fail(where, 'expected { sigma = "5m" } (and relative = true for a share)')
        r.known(spec, _PARAM_KEYS, where)
        sigma = r.number(spec["sigma"], f"{where}.sigma", nonnegative=True)
        relative = spec.get("relative", False)
        if not isinstance(relative, bool):
            raise r.fail(f"{where}.relative", "expected true or false")
        params[name.lower()] = (sigma, relative)
    if yield_fraction is not None:
        needed = samples_for_yield(yield_fraction)
        if samples < needed:
            raise r.fail(f"{place}.samples", f"{samples} samples cannot show a yield of "
                         f"{yield_fraction:g} at 95 % confidence: even with every sample "
                         f"passing, the lower bound is "
                         f"{0.025 ** (1 / samples):.4f}; it takes at least {needed}")
    return MonteCarlo(samples=samples, seed=seed, base=base, lib=lib, params=params)


def expand_samples(r: Reader, corners: tuple[Corner, ...], mc: MonteCarlo | None,
                   netlist_params: dict[str, float]) -> tuple[Corner, ...]:
    """``corners`` with every base corner of ``mc`` replaced by its samples (as they are
    when ``mc`` is None).

    Parameters
    ----------
    r
        The job's reader, for messages.
    corners
        The job's corners, before the ``[[feedback]]`` configurations.
    mc
        The ``[monte_carlo]`` table.
    netlist_params
        The netlist's top-level ``.param`` values that are plain numbers (SI), the nominal
        of a drawn parameter no corner sets.
    """
    if mc is None:
        return corners
    import numpy as np

    names = [c.name for c in corners]
    for i, name in enumerate(mc.base or ()):
        if name not in names:
            raise r.fail(f"[monte_carlo].base[{i}]", f"{name!r} is not a corner"
                         + did_you_mean(name, names))
    bases = set(mc.base or names)
    z = np.random.default_rng([mc.seed, 0]).standard_normal((mc.samples, len(mc.params)))
    seeds = np.random.default_rng([mc.seed, 1]).integers(1, _SEED_RANGE, mc.samples)
    expanded: list[Corner] = []
    for corner in corners:
        if corner.name not in bases:
            expanded.append(corner)
            continue
        nominal = {}
        for name in mc.params:
            value = corner.params.get(name, netlist_params.get(name))
            if value is None:
                known = sorted(set(corner.params) | set(netlist_params))
                raise r.fail(f"[monte_carlo].params.{key_path(name)}",
                             f"{name!r} is neither a .param of the netlist nor set by corner "
                             f"{corner.name!r}, so there is nothing to vary"
                             + did_you_mean(name, known))
            nominal[name] = value
        for k in range(mc.samples):
            drawn = {}
            for j, (name, (sigma, relative)) in enumerate(mc.params.items()):
                spread = sigma * float(z[k, j])
                drawn[name] = nominal[name] * (1 + spread) if relative else nominal[name] + spread
            sample = Sample(base=corner.name, index=k, seed=int(seeds[k]), params=drawn)
            expanded.append(replace(corner, name=f"{corner.name}#{k}",
                                    lib=mc.lib if mc.lib is not None else corner.lib,
                                    params={**corner.params, **drawn}, sample=sample))
    return tuple(expanded)
