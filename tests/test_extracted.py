"""Extracted netlists: the map's form detected from the netlist, the two-element map
against direct simulation, and the saved-vectors deck against the deck that saves all.

The wired netlists are INVENTED BENCHMARK DATA (scripts/bench_layout.py: the invented
demo amplifier with dangling RC wires added to some of its nets).
"""

from __future__ import annotations

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
    assert branch.alters({"cc": 1e-12, "rc": 1000.0}) == ["alter c.x1.cc = 9.9999999999999998e-13",
                                                           "alter r.x1.rc = 1000"]


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
