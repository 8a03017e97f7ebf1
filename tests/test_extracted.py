"""Extracted netlists: the map's form detected from the netlist, the two-element map
against direct simulation, and the saved-vectors deck against the deck that saves all.

The wired netlists are INVENTED BENCHMARK DATA (scripts/bench_layout.py: the invented
demo amplifier with dangling RC wires added to some of its nets).
"""

from __future__ import annotations

import dataclasses
import sys
from pathlib import Path

import numpy as np
import pytest

from amploop.analysis.twomap import TwoElementMap, two_element_samples
from amploop.bench.amplifier import prepare_amplifier
from amploop.bench.branch import compensation_branch
from amploop.bench.requests import AnalysisRequest
from amploop.bench.testbench import build_testbench
from amploop.sim.ngspice import NgspiceSession
from amploop.spec.job import load_job

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "scripts"))
from bench_layout import extracted_job


@pytest.fixture(scope="module")
def session():
    return NgspiceSession()


def _amplifier(tmp_path, nets, segments=3):
    job = load_job(extracted_job(tmp_path / "job", segments, 2, nets=nets))
    return job, prepare_amplifier(job)


@pytest.mark.parametrize(("nets", "form"), [
    (("nz",), "two-element"),
    (("n1", "out", "tail"), "one-impedance"),
    ((), "one-impedance"),
])
def test_form_follows_the_node_between_rc_and_cc(tmp_path, nets, form):
    """Wiring on nz (between Rc and Cc) makes the two-element form; wiring elsewhere, or
    none, keeps the one-impedance form (the demo netlist: Rc n1 nz, Cc nz out)."""
    _, amplifier = _amplifier(tmp_path, nets)
    branch = compensation_branch(amplifier)
    assert (branch.cc_element, branch.rc_element, branch.middle) == ("Cc", "Rc", "nz")
    assert branch.form == form


def _loop_gain(session, amplifier, corner, cc, rc):
    bench = build_testbench(amplifier, corner, {"cc": cc, "rc": rc})
    return bench.loop_gain(session.run(bench.request(120)))


def test_two_element_map_is_exact_with_wiring_on_the_middle_node(tmp_path, session):
    """Seven samples fix the map; at other (Cc, Rc), inside and outside the sampled
    range, it matches a direct ngspice simulation within 1e-6 relative at every
    frequency (outside reference: the simulation itself). The one-impedance map from
    three of the same samples does not (it misses by more than 1e-3): the test can fail."""
    from amploop.analysis.compmap import CompensationMap

    job, amplifier = _amplifier(tmp_path, ("nz", "out"), segments=20)
    corner = job.corners[1]
    samples = two_element_samples((0.2e-12, 10e-12), (0.0, 20e3), 500.0)
    responses = [_loop_gain(session, amplifier, corner, p["cc"], p["rc"]) for p in samples]
    pairs = [(p["cc"], p["rc"]) for p in samples]
    two = TwoElementMap.from_loop_gains(pairs, responses)
    one = CompensationMap.from_loop_gains([pairs[0], pairs[3], pairs[6]],
                                          [responses[0], responses[3], responses[6]])
    for cc, rc in [(1.3e-12, 2500.0), (0.3e-12, 19e3), (8e-12, 150.0), (4e-12, 25e3)]:
        direct = _loop_gain(session, amplifier, corner, cc, rc).values
        assert np.max(np.abs(two.loop_gain_values(cc, rc) / direct - 1)) < 1e-6
    assert np.max(np.abs(one.loop_gain_values(1.3e-12, 2500.0) / direct - 1)) > 1e-3


@pytest.mark.parametrize("job_file", [REPO / "netlists" / "demo" / "job.toml",
                                      REPO / "netlists" / "ptm45" / "job.toml"])
def test_saving_only_the_vectors_read_changes_no_loop_gain(session, job_file):
    """The deck with its ``.save`` line gives the loop gain and the operating point of the
    deck without it (ngspice then saves every vector: the old path) within 1e-6 relative
    at every frequency, on the demo and on the 45 nm example."""
    job = load_job(job_file)
    amplifier = prepare_amplifier(job)
    for corner in job.corners[:2]:
        bench = build_testbench(amplifier, corner, {})
        lines = bench.deck.splitlines()
        assert sum(line.startswith(".save ") for line in lines) == 1
        old_deck = "\n".join(line for line in lines if not line.startswith(".save "))
        new = session.run(bench.request(120))
        old = session.run(AnalysisRequest("old", old_deck, bench.steps))
        t_new, t_old = bench.loop_gain(new).values, bench.loop_gain(old).values
        assert np.max(np.abs(t_new / t_old - 1)) < 1e-6
        for name, value in old.reads[-1].items():
            np.testing.assert_allclose(new.reads[-1][name], value, rtol=1e-9)


@pytest.mark.parametrize("job_file", [REPO / "netlists" / "demo" / "job.toml",
                                      REPO / "netlists" / "ptm45" / "job.toml"])
def test_a_supply_at_0_v_tied_to_ground_changes_no_loop_gain(session, job_file):
    """A ``[bias]`` supply written as 0 V is tied to ground: no source line for it, and
    the loop gain and operating point of the deck that holds it with a 0 V source (the
    old deck, made here by writing the same 0 V as the expression ``{0}``) within 1e-9
    relative at every frequency. A 0 V source is a short (circuit theory, common
    practice); a supply written as an expression keeps its source."""
    job = load_job(job_file)
    zero = [s.port for s in job.bias.sources if s.kind == "volts" and s.value.strip() == "0"]
    assert zero == ["vss"]
    old_sources = tuple(dataclasses.replace(s, value="{0}") if s.port in zero else s
                        for s in job.bias.sources)
    old_job = dataclasses.replace(job, bias=dataclasses.replace(job.bias, sources=old_sources))
    amplifier, old_amplifier = prepare_amplifier(job), prepare_amplifier(old_job)
    for corner in job.corners[:2]:
        bench = build_testbench(amplifier, corner, {})
        old_bench = build_testbench(old_amplifier, corner, {})
        assert "* port vss tied to ground" in bench.deck and " tb_vss " not in bench.deck
        assert "tied to ground" not in old_bench.deck
        assert any(line.startswith("Vbias") and " tb_vss 0 dc {0}" in line
                   for line in old_bench.deck.splitlines())
        new, old = session.run(bench.request(120)), session.run(old_bench.request(120))
        t_new, t_old = bench.loop_gain(new).values, old_bench.loop_gain(old).values
        assert np.max(np.abs(t_new / t_old - 1)) < 1e-9
        op_new, op_old = bench.operating_point(new), old_bench.operating_point(old)
        for field in ("output_v", "common_mode_v", "supply_span_v", "inverting_input_v"):
            assert getattr(op_new, field) == pytest.approx(getattr(op_old, field), rel=1e-9)
        assert [d.name for d in op_new.devices] == [d.name for d in op_old.devices]
        assert [d.vds_v for d in op_new.devices] == pytest.approx(
            [d.vds_v for d in op_old.devices], rel=1e-9)


def _port_map(session, amplifier, corner, form, reference):
    from amploop.bench.portbench import PortCharacterisation, port_ports

    branch = compensation_branch(amplifier)
    bench = build_testbench(amplifier, corner, reference)
    char = PortCharacterisation(bench, form, tuple(port_ports(branch, form, amplifier)))
    output = session.run(char.request(amplifier, 120))
    return char, output, char.port_map(amplifier, output)


@pytest.mark.parametrize(("nets", "form"), [(("nz", "out", "n1"), "two-element"),
                                            (("out", "n1"), "one-impedance"),
                                            ((), "one-impedance")])
def test_port_map_is_exact_in_either_form(tmp_path, session, nets, form):
    """One analysis at reference values (the probe's two runs and one run per port
    source) predicts the loop gain at other (Cc, Rc), inside and outside the bounds,
    within 1e-6 relative at every frequency of a direct ngspice simulation there (the
    outside reference); its first two runs are the testbench's own analysis (1e-12)."""
    job, amplifier = _amplifier(tmp_path, nets, segments=20)
    corner = job.corners[1]
    reference = {"cc": 1.5e-12, "rc": 3000.0}
    char, output, port_map = _port_map(session, amplifier, corner, form, reference)
    assert output.reads and sum(s.is_ac for s in char.request(amplifier, 1).steps) == \
        2 + (2 if form == "two-element" else 1)
    own = char.bench.loop_gain(char.bench_output(output)).values
    direct = _loop_gain(session, amplifier, corner, 1.5e-12, 3000.0).values
    assert np.max(np.abs(own / direct - 1)) < 1e-12
    for cc, rc in [(1.3e-12, 2500.0), (0.3e-12, 19e3), (8e-12, 150.0), (0.2e-12, 25e3)]:
        direct = _loop_gain(session, amplifier, corner, cc, rc).values
        assert np.max(np.abs(port_map.loop_gain_values(cc, rc) / direct - 1)) < 1e-6


def test_port_map_on_the_45nm_example_matches_direct_simulation(session):
    """The 45 nm BSIM4 example (no wiring: one-impedance form) at two of its corners:
    the port map against direct simulation at a point away from the reference, 1e-6."""
    job = load_job(REPO / "netlists" / "ptm45" / "job.toml")
    amplifier = prepare_amplifier(job)
    branch = compensation_branch(amplifier)
    assert branch is not None and branch.form == "one-impedance"
    values = amplifier.values_in_effect({})
    for corner in job.corners[:2]:
        _, _, port_map = _port_map(session, amplifier, corner, "one-impedance", values)
        cc, rc = values["cc"] * 1.7, values["rc"] * 0.6 + 100.0
        direct = _loop_gain(session, amplifier, corner, cc, rc).values
        assert np.max(np.abs(port_map.loop_gain_values(cc, rc) / direct - 1)) < 1e-6


def _tune_both_ways(monkeypatch, job, tmp_path):
    import dataclasses

    from amploop.strategy import mapping
    from amploop.strategy.tune import tune

    job = dataclasses.replace(job, corners=job.corners[:2])
    new = tune(job, out=tmp_path / "ports", workers=1, time_domain=False)
    with monkeypatch.context() as patch:
        patch.setattr(mapping, "port_form", lambda *args: None)
        old = tune(job, out=tmp_path / "samples", workers=1, time_domain=False)
    return new, old


@pytest.mark.parametrize("which", ["demo", "demo-wired", "ptm45"])
def test_ports_and_samples_choose_the_same_values_and_margins(tmp_path, monkeypatch, which):
    """`tune` through the port map and through the sampled maps (the previous path,
    forced) on two corners: the same chosen values, and the final loop gains within 1e-6
    relative at every frequency (both are simulations at the chosen values); the port
    path runs fewer AC analyses, and results.json names the form and the method."""
    if which == "ptm45":
        job = load_job(REPO / "netlists" / "ptm45" / "job.toml")
    else:
        nets = ("nz", "out") if which == "demo-wired" else ()
        job = load_job(extracted_job(tmp_path / "job", 5, 10, nets=nets))
    new, old = _tune_both_ways(monkeypatch, job, tmp_path)
    assert new.status == old.status == "converged"
    assert new.outcome.values == old.outcome.values
    for a, b in zip(new.corners, old.corners):
        assert np.max(np.abs(a.loop_gain.values / b.loop_gain.values - 1)) < 1e-6
    assert new.ac_run + new.ac_reused < old.ac_run + old.ac_reused
    form = "two-element" if which == "demo-wired" else "one-impedance"
    assert new.outcome.extra["map_form"] == form == new.as_json()["map_form"]
    assert (new.as_json()["map_method"], old.as_json()["map_method"]) == ("ports", "samples")
