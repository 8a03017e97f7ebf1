"""The simulator layer on its own: ngspice's messages read by amploop, and nothing kept.

References: ngspice 39's own behaviour (its plot list, its messages), as observed.
"""

from __future__ import annotations

import numpy as np
import pytest

from amploop.bench.requests import AnalysisRequest, Step
from amploop.errors import SimulatorError
from amploop.sim.ngspice import NgspiceSession, summarise_failure

RC = "rc low-pass\nV1 a 0 dc 0 ac 1\nR1 a b 1k\nC1 b 0 1n\n.end\n"


@pytest.fixture(scope="module")
def session():
    return NgspiceSession()


def test_a_first_order_low_pass_reads_back_exactly(session):
    """|H| = 1/√(1 + (ωRC)²) at the analysis frequencies (hand calculation)."""
    out = session.run(AnalysisRequest("rc", RC, (Step("ac dec 10 1 10meg", ("frequency", "v(b)")),)))
    f = np.real(out.reads[0]["frequency"])
    h = out.reads[0]["v(b)"]
    expected = 1 / (1 + 2j * np.pi * f * 1e3 * 1e-9)
    assert np.max(np.abs(h - expected)) < 1e-12


def test_every_circuit_and_plot_is_freed_after_an_analysis(session):
    for _ in range(50):
        session.run(AnalysisRequest("rc", RC, (Step("ac dec 10 1 10meg", ("v(b)",)),)))
    assert session._shared.plot_names == ["const"]
    _rc, out, err = session._command("listing")
    assert any("no circuit" in line.lower() for line in out + err)


def test_a_rejected_command_is_an_error_not_a_silent_zero(session):
    steps = (Step("alter nosuch acmag=0"), Step("ac dec 2 1 10", ("v(b)",)))
    with pytest.raises(SimulatorError, match="rejected") as caught:
        session.run(AnalysisRequest("rc", RC, steps))
    assert caught.value.kind == "failed"  # neither the deck nor the circuit is at fault
    # and the session still works
    session.run(AnalysisRequest("rc", RC, (Step("ac dec 2 1 10", ("v(b)",)),)))


def test_a_vector_that_is_not_there_is_an_error(session):
    with pytest.raises(SimulatorError, match="not found"):
        session.run(AnalysisRequest("rc", RC, (Step("ac dec 2 1 10", ("v(nosuch)",)),)))


def test_a_floating_node_is_an_error_even_when_gmin_stepping_succeeds(session):
    deck = "floating\nV1 a 0 dc 1 ac 1\nR1 a b 1k\nC1 b c 1p\nC2 c 0 1p\n.end\n"
    with pytest.raises(SimulatorError, match="singular matrix at node c"):
        session.run(AnalysisRequest("f", deck, (Step("ac dec 2 1 10", ("v(b)",)),)))


def test_failure_summaries_are_one_readable_line():
    assert summarise_failure(["Warning: singular matrix:  check node x"]).startswith(
        "singular matrix at node x")
    assert "no DC operating point" in summarise_failure(
        ["AC operating point failed -", "Error: Transient op failed, timestep too small"])
    assert summarise_failure(["Error on line:", "  r1 a b inf", "unknown parameter (inf)"]) == \
        "Error on line: r1 a b inf unknown parameter (inf)"


# -- the kind of a failure, from real ngspice in a worker process ------------------------


def test_each_failure_has_its_kind_and_keeps_it_across_the_process_boundary():
    """Errors raised in a worker come back to the coordinator with their kind, which the
    command line and the corner results decide by (never by ngspice's wording). The
    messages are ngspice 39's own: "Undefined parameter", "can't find model", "singular
    matrix", gmin and source stepping failing (exp(40·v) = v/1 kΩ has no DC solution)."""
    import pickle

    from amploop.sim.pool import WorkerPool

    floating = "floating\nV1 a 0 dc 1 ac 1\nR1 a b 1k\nC1 b c 1p\nC2 c 0 1p\n.end\n"
    long = RC.replace("ac 1", "ac 1 pulse(0 1 0 1u 1u 1 2)")
    requests = {
        "undefined parameter": (AnalysisRequest(
            "u", "bad\nV1 a 0 dc 1\nR1 a 0 {nosuch}\n.end\n", (Step("op"),)), "parse"),
        "missing model": (AnalysisRequest(
            "m", "bad\nV1 a 0 dc 1\nQ1 a 0 0 nomodel\n.end\n", (Step("op"),)), "parse"),
        "floating node": (AnalysisRequest(
            "f", floating, (Step("ac dec 2 1 10", ("v(b)",)),)), "convergence"),
        "no DC solution": (AnalysisRequest(
            "n", "nodc\nBx 0 nx I=exp(40*v(nx))\nRx nx 0 1k\n.end\n", (Step("op"),)),
            "convergence"),
        "time-out": (AnalysisRequest(  # 2 million time steps under a 0.05 s limit
            "t", long, (Step("tran 10n 20m 0 10n", ("v(b)",)),), time_limit_s=0.05), "timeout"),
    }
    with WorkerPool(1) as pool:
        got = dict(pool.run([(name, request) for name, (request, _) in requests.items()]))
    kinds = {name: getattr(got[name], "kind", type(got[name]).__name__) for name in requests}
    assert kinds == {name: kind for name, (_, kind) in requests.items()}, got
    assert "singular matrix at node c" in got["floating node"].problem
    assert "time-out" in got["time-out"].problem and got["time-out"].place == "t"
    again = pickle.loads(pickle.dumps(got["missing model"]))  # as Dask sends it
    assert (again.kind, again.problem, again.place) == ("parse", got["missing model"].problem, "m")
    with pytest.raises(ValueError, match="unknown SimulatorError kind"):
        SimulatorError("x", kind="parse error")


# -- work done in the worker after an analysis ------------------------------------------


def test_after_work_runs_in_the_worker_and_a_failure_there_keeps_the_analysis():
    """``after`` comes back as the output's ``after``; when it raises, the analysis is
    still delivered, without an ``after``."""
    from amploop.sim.pool import WorkerPool

    steps = (Step("ac dec 10 1 10meg", ("v(b)",)),)
    with WorkerPool(1) as pool:
        results = dict(pool.run([
            ("fine", AnalysisRequest("rc", RC, steps, after=repr)),
            ("fails", AnalysisRequest("rc", RC, steps, after=int)),  # int(output): TypeError
        ]))
    assert results["fine"].after.startswith("AnalysisOutput(")
    assert results["fails"].after is None
    assert np.array_equal(results["fails"].reads[0]["v(b)"], results["fine"].reads[0]["v(b)"])


def test_no_analysis_waits_behind_a_long_one_while_a_worker_is_free():
    """Two warm workers, a long transient and two short AC runs, in that order: the short
    ones go to the free worker (neither is queued behind the long one), so the long one
    finishes last. A second task is queued behind a running one only while at least as
    many tasks wait as there are workers."""
    from amploop.sim.pool import WorkerPool

    step_rc = RC.replace("ac 1", "ac 1 pulse(0 1 0 1u 1u 1 2)")
    short = AnalysisRequest("short", RC, (Step("ac dec 10 1 10meg", ("v(b)",)),))
    long = AnalysisRequest("long", step_rc, (Step("tran 10n 2m 0 10n", ("v(b)",)),))
    with WorkerPool(2) as pool:
        for _ in range(500):  # until both workers have started their ngspice
            list(pool.run([(i, short) for i in range(4)]))
            if len(pool._workers) == 2 and all(w.ready for w in pool._workers):
                break
        assert len(pool._workers) == 2 and all(w.ready for w in pool._workers)
        order = [key for key, _ in pool.run([("long", long), ("short 1", short),
                                             ("short 2", short)])]
    assert order == ["short 1", "short 2", "long"]


def test_corner_files_are_the_same_whether_the_workers_or_the_coordinator_write_them(tmp_path):
    """With every core simulating the workers write each corner's CSV and deck; with a
    core to spare (or remote workers) the coordinator does. Same bytes either way."""
    from conftest import DEMO

    from amploop.corners.measure import measure
    from amploop.sim.pool import WorkerPool, default_workers
    from amploop.spec.job import load_job

    job = load_job(DEMO / "job.toml")
    outs = {}
    for who in ("workers", "coordinator"):
        with WorkerPool(default_workers()) as pool:
            pool.shares_files = who == "workers"
            outs[who] = tmp_path / who
            measure(job, out=outs[who], pool=pool, time_domain=False)
    files = sorted(p.relative_to(outs["workers"]) for p in outs["workers"].rglob("*")
                   if p.suffix in (".csv", ".cir"))
    assert len(files) == 2 * len(job.corners)
    for relative in files:
        assert (outs["workers"] / relative).read_bytes() == \
            (outs["coordinator"] / relative).read_bytes(), relative
