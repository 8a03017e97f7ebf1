"""Monte Carlo samples, checked against outside references.

- The linear two-stage macromodel whose transconductances are parameters, with spreads
  drawn by amploop: each sample's margins, and the statistics over them, against the
  test's own nodal analysis (tests/nodal.py: Bode's return ratio of gm1, H. W. Bode, 1945)
  of the same draws, made here from the documented draw (numpy's default_rng([seed, 0])).
- The yield interval against scipy's exact binomial interval (scipy.stats.binomtest).
- An ngspice ``agauss`` section in an invented model file: the samples differ, and the
  same seed repeats them exactly.

Element values and the model file are invented for the tests.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from nodal import Macromodel, dense_margins, exact_loop_gain
from scipy.stats import binomtest

from amploop.analysis.statistics import clopper_pearson, fewest_passing, spread
from amploop.corners.measure import measure
from amploop.errors import JobError
from amploop.spec.job import load_job

BASE = Macromodel(cc=1e-12, rc=500.0, kind="capacitive", z_in=2e-12, z_fb=1e-12, r_dc=1e9)
SIGMA_GM1, SIGMA_GM2 = 0.10, 0.08   # relative spreads (invented)
SAMPLES, SEED = 12, 7
_F = np.logspace(0, 10, 20001)


def param_netlist(m: Macromodel) -> str:
    """The macromodel with gm1 and gm2 as top-level parameters (the corners set them)."""
    return m.netlist().replace(f"inp inn {m.gm1!r}", "inp inn {gm1}").replace(
        f"n1 0 {m.gm2!r}", "n1 0 {gm2}")


def job_dict(tmp_path, **extra) -> dict:
    (tmp_path / "macro.cir").write_text(param_netlist(BASE))
    data = {
        "name": "mc",
        "amplifier": {"netlist": "macro.cir", "subckt": "macro", "in_p": "inp", "in_n": "inn",
                      "out": "out"},
        "bias": {"common_mode": "0.9"},
        "feedback": {"kind": "capacitive", "input": "2p", "feedback": "1p", "dc_path": "1G",
                     "load": "{cl}"},
        "compensation": {"cc": {"param": "cc", "min": "0.2p", "max": "10p"},
                         "rc": {"param": "rc", "min": "0", "max": "20k"}},
        "analysis": {"start": "1", "stop": "10G", "points_per_decade": 200},
        "params": {"gm1": BASE.gm1, "gm2": BASE.gm2},
        "target": {"phase_margin": 55.0},
        "corners": [{"name": "light", "params": {"cl": 1e-12}},
                    {"name": "heavy", "params": {"cl": 3e-12}}],
        "monte_carlo": {"samples": SAMPLES, "seed": SEED, "base": ["heavy"],
                        "params": {"gm1": {"sigma": SIGMA_GM1, "relative": True},
                                   "gm2": {"sigma": SIGMA_GM2, "relative": True}}},
    }
    data.update(extra)
    return data


def test_sample_statistics_equal_a_monte_carlo_of_the_nodal_model(tmp_path):
    job = load_job(job_dict(tmp_path), base=tmp_path)
    names = [c.name for c in job.corners]
    assert names == ["light"] + [f"heavy#{k}" for k in range(SAMPLES)]
    result = measure(job, out=tmp_path / "out", workers=2, time_domain=False)
    # the test's own Monte Carlo: the same standard normals, the nodal model at each draw
    z = np.random.default_rng([SEED, 0]).standard_normal((SAMPLES, 2))
    pms, ugfs = [], []
    for k in range(SAMPLES):
        m = BASE.with_(cl=3e-12, gm1=BASE.gm1 * (1 + SIGMA_GM1 * z[k, 0]),
                       gm2=BASE.gm2 * (1 + SIGMA_GM2 * z[k, 1]))
        pm, ugf, _ = dense_margins(_F, exact_loop_gain(m, _F)[None, :])
        pms.append(float(pm[0]))
        ugfs.append(float(ugf[0]))
        measured = result.corners[1 + k]
        assert measured.corner.sample.params["gm1"] == pytest.approx(m.gm1, rel=1e-15)
        assert measured.margins.phase_margin_deg == pytest.approx(pms[-1], abs=0.01)
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    (stats,) = data["statistics"]
    assert stats["base"] == "heavy" and stats["samples"] == SAMPLES
    reference = spread(pms)  # numpy's mean, std (ddof 1) and percentiles of the nodal PMs
    for key in ("mean", "std", "min", "p01", "p50", "p99"):
        assert stats["phase_margin_deg"][key] == pytest.approx(getattr(reference, key), abs=0.01)
    assert stats["phase_margin_deg"]["std"] > 0.1  # the draws do spread the phase margin
    assert stats["unity_gain_hz"]["mean"] == pytest.approx(np.mean(ugfs), rel=1e-4)
    passed = sum(pm >= 55.0 for pm in pms)
    assert stats["meeting_target"] == passed
    assert stats["yield_interval_95"] == pytest.approx(
        list(binomtest(passed, SAMPLES).proportion_ci(0.95, "exact")), abs=1e-9)
    entry = data["corners"][1]
    assert entry["name"] == "heavy#0" and entry["sample"]["base"] == "heavy"
    assert entry["sample"]["params"]["gm2"] == pytest.approx(entry["params"]["gm2"])
    assert isinstance(entry["sample"]["seed"], int)


@pytest.mark.parametrize("passed,total", [(0, 10), (3, 10), (10, 10), (197, 200), (200, 200),
                                          (1, 1), (499, 500)])
def test_clopper_pearson_equals_scipys_exact_interval(passed, total):
    ci = binomtest(passed, total).proportion_ci(confidence_level=0.95, method="exact")
    assert clopper_pearson(passed, total) == pytest.approx((ci.low, ci.high), abs=1e-12)


def test_fewest_passing_is_the_first_count_whose_bound_reaches_the_share():
    for total, share in ((400, 0.99), (1000, 0.99), (50, 0.9)):
        k = fewest_passing(total, share)
        low = binomtest(k, total).proportion_ci(0.95, "exact").low
        below = binomtest(k - 1, total).proportion_ci(0.95, "exact").low
        assert low >= share > below
    assert fewest_passing(200, 0.99) is None  # 0.025 ** (1/200) = 0.9817 < 0.99
    # the load-time check's count (368 for 0.99) is the first where all passing suffice
    assert fewest_passing(368, 0.99) == 368 and fewest_passing(367, 0.99) is None


MODELS = """* invented statistical model file (test data)
.lib nom
.param gm1s=100u
.endl nom
.lib stat
.param gm1s=agauss(100u, 30u, 3)
.endl stat
"""


def test_an_agauss_section_is_honoured_and_its_seed_repeats_exactly(tmp_path):
    (tmp_path / "models.lib").write_text(MODELS)
    data = job_dict(tmp_path)
    (tmp_path / "macro.cir").write_text(param_netlist(BASE).replace("{gm1}", "{gm1s}"))
    data["amplifier"]["models"] = "models.lib"
    data["corners"] = [{"name": "heavy", "lib": "nom", "params": {"cl": 3e-12}}]
    data["monte_carlo"] = {"samples": 4, "seed": 3, "lib": "stat"}
    job = load_job(data, base=tmp_path)
    assert {c.lib for c in job.corners} == {"stat"}
    first = measure(job, out=tmp_path / "a", workers=2, time_domain=False)
    again = measure(load_job(data, base=tmp_path), out=tmp_path / "b", workers=2,
                    time_domain=False)
    pm = [c.margins.phase_margin_deg for c in first.corners]
    assert len(set(np.round(pm, 6))) == 4  # every sample drew its own gm1 (10 % sigma)
    assert [c.margins.phase_margin_deg for c in again.corners] == pm  # bit for bit
    data["monte_carlo"]["seed"] = 4
    other = measure(load_job(data, base=tmp_path), out=tmp_path / "c", workers=2,
                    time_domain=False)
    assert [c.margins.phase_margin_deg for c in other.corners] != pm


@pytest.mark.parametrize("change,message", [
    ({"base": ["havy"]}, "'havy' is not a corner"),
    ({"samples": 1}, "at least 2 samples"),
    ({"samples": 50_000}, "would cost 50000 AC analyses"),
    ({"params": {"gm3": {"sigma": 0.1, "relative": True}}}, "'gm3' is neither a .param"),
])
def test_bad_monte_carlo_tables_are_one_line_errors(tmp_path, change, message):
    data = job_dict(tmp_path)
    data["monte_carlo"].update(change)
    with pytest.raises(JobError) as caught:
        load_job(data, base=tmp_path)
    assert message in str(caught.value) and "[monte_carlo]" in str(caught.value)
    assert "\n" not in str(caught.value)


@pytest.mark.parametrize("target,message", [
    ({"sigma": 3, "yield": 0.9}, "give sigma or yield, not both"),
    ({"yield": 0.99}, "it takes at least 368"),
])
def test_bad_statistical_targets_are_one_line_errors(tmp_path, target, message):
    data = job_dict(tmp_path)
    data["target"].update(target)
    with pytest.raises(JobError) as caught:
        load_job(data, base=tmp_path)
    assert message in str(caught.value)


def _nodal_statistic(cc: float, rc: float, k: float) -> tuple[float, float]:
    """(mean − kσ of the PM, smallest UGF) of the heavy corner's samples on the nodal model
    at (``cc``, ``rc``), with the same draws as amploop's."""
    z = np.random.default_rng([SEED, 0]).standard_normal((SAMPLES, 2))
    pms, ugfs = [], []
    for row in z:
        m = BASE.with_(cl=3e-12, cc=cc, rc=rc, gm1=BASE.gm1 * (1 + SIGMA_GM1 * row[0]),
                       gm2=BASE.gm2 * (1 + SIGMA_GM2 * row[1]))
        pm, ugf, _ = dense_margins(_F, exact_loop_gain(m, _F)[None, :])
        pms.append(pm[0])
        ugfs.append(ugf[0])
    return float(np.mean(pms) - k * np.std(pms, ddof=1)), float(min(ugfs))


def test_tune_to_a_sigma_target_meets_it_on_the_nodal_model(tmp_path):
    from amploop.strategy.tune import tune

    data = job_dict(tmp_path, target={"phase_margin": 60.0, "sigma": 2})
    data["analysis"]["points_per_decade"] = 40
    data["compensation"]["rc"]["max"] = "1k"  # so that the phase margin binds
    result = tune(load_job(data, base=tmp_path), out=tmp_path / "out", workers=2,
                  time_domain=False)
    assert result.status == "converged", result.outcome.message
    cc, rc = result.outcome.values["cc"], result.outcome.values["rc"]
    statistic, _ = _nodal_statistic(cc, rc, 2)
    # the rule holds on the exact model, and the optimum sits on it (within the tolerance)
    assert 60.0 - 0.02 <= statistic <= 61.0
    saved = json.loads((tmp_path / "out" / "results.json").read_text())
    (stats,) = saved["statistics"]
    assert stats["meets_target"] is True and stats["sigma"] == 2
    assert stats["phase_margin_mean_minus_k_sigma_deg"] == pytest.approx(statistic, abs=0.05)
    assert saved["target"]["sigma"] == 2
