"""Tuning the demo to a settling ceiling, and the settling figures on the report's pages.

References:
- ngspice's step transients of amploop's step deck (the step check): the simulated
  settling times the ceiling is held to are read back from the tune's result.
- What the PDF holds is read back with poppler's pdftotext.
The demo's circuit, models and corners are invented (netlists/demo/job.toml says so); the
ceilings are invented too: 80 ns lies above the demo's worst-corner settling at its
bandwidth optimum (66.1 ns when tests/test_settling_tune.py was written), 20 ns below its
settling optimum (53.0 ns then).
"""

from __future__ import annotations

import shutil
from dataclasses import replace
from pathlib import Path

import pytest
from test_report_pages import pdf_pages

from amploop.report import build_report
from amploop.report.data import load_report_data
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

DEMO = Path(__file__).resolve().parents[1] / "netlists" / "demo"
MET, UNREACHABLE = 80e-9, 20e-9

needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None,
                                   reason="poppler-utils (pdftotext) not installed; "
                                   "scripts/setup installs it")


def _demo_tune(ceiling_s: float, out: Path):
    job = load_job(DEMO / "job.toml")
    return job, tune(replace(job, target=replace(job.target, settling_time_s=ceiling_s)),
                     out=out, workers=2)


@pytest.fixture(scope="module")
def met(tmp_path_factory):
    """The demo tuned (bandwidth objective) under a ceiling it meets, its report drawn."""
    out = tmp_path_factory.mktemp("ceiling") / "out"
    job, result = _demo_tune(MET, out)
    build_report(out, pngs=False)
    return job, result, out


def test_a_ceiling_the_demo_meets_is_held_at_every_corner(met):
    """Converged; every corner's simulated step (ngspice transient) settles within the
    ceiling; results.json records it."""
    job, result, _ = met
    assert result.status == "converged", result.outcome.message
    times = {n: c.metrics.settling_s for n, c in result.step_checks.items()}
    assert set(times) == {c.name for c in job.corners}
    assert all(t is not None and t <= MET for t in times.values()), times
    assert result.as_json()["target"]["settling_time_s"] == MET


def test_a_ceiling_the_demo_cannot_meet_is_named_with_its_corner(tmp_path):
    """Infeasible or failed, in one line naming the ceiling and a corner."""
    job, result = _demo_tune(UNREACHABLE, tmp_path / "out")
    message = result.outcome.message
    assert result.status in ("infeasible", "failed"), message
    assert "\n" not in message
    assert "20 ns" in message, message
    assert any(f"corner {c.name}" in message for c in job.corners), message


def _map_page(out: Path) -> str:
    pages = pdf_pages(out / "report.pdf")
    return next(p for p in pages if "Compensation map of the limiting corner" in p)


@needs_poppler
def test_the_settling_tunes_pages_show_its_settling(met):
    """The map page names the worst-corner settling contours and the chosen point's
    settling; the summary states the objective, the ceiling and both settling times."""
    _, result, out = met
    page = _map_page(out)
    assert "worst-corner settling" in page
    assert "predicted" in page and "simulated" in page
    summary = pdf_pages(out / "report.pdf")[0]
    assert "Objective: the widest worst-corner unity-gain frequency" in summary
    assert "every corner settles within 80 ns" in summary
    assert "Settling: worst-corner" in summary
    assert "simulated (step transients)" in summary and "predicted (closed-loop maps)" in summary
    with load_report_data(out) as data:
        assert set(data.cl_maps) == set(result.step_checks)


@needs_poppler
def test_a_bandwidth_tunes_map_page_has_no_settling_contours(tmp_path):
    """The linear macromodel (invented values, tests/nodal.py) tuned for bandwidth: no
    closed-loop maps, no settling on its map page or summary."""
    from conftest import write_macro_job
    from nodal import Macromodel

    from amploop.cli import main

    job = write_macro_job(tmp_path / "job", Macromodel(cc=1.5e-12, rc=800.0),
                          extra="[target]\nphase_margin = 60\n")
    out = tmp_path / "out"
    assert main(["tune", str(job), "--out", str(out), "--workers", "1", "--quiet"]) == 0
    page = _map_page(out)
    assert "Compensation map" in page and "settling" not in page
    assert "Settling:" not in pdf_pages(out / "report.pdf")[0]
    with load_report_data(out) as data:
        assert data.maps and not data.cl_maps
