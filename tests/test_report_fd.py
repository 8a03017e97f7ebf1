"""The report of a fully-differential amplifier: both loops on the summary, the corner
pages and the map, the loop that limits named; a single-ended report unchanged.

References: poppler's pdftotext for what the PDF holds, read against results.json; the
exact nodal model of tests/nodal_fd.py (its own nodal analysis of both loop gains) for
the common-mode margins the pages print.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from nodal import Macromodel, dense_margins
from nodal_fd import CM_LIMITED, common_mode_loop_gain
from test_fd_measure import fd_job
from test_report import si

from amploop.analysis.margins import loop_margins
from amploop.bench.loops import loop_readout, readout_for
from amploop.cli import main
from amploop.report import build_report
from amploop.report.data import ReportData, load_report_data
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None,
                                   reason="poppler-utils (pdftotext, pdftoppm) not installed; "
                                   "scripts/setup installs it")

TARGET_PM, CM_TARGET_PM = 60.0, 45.0
#: Two corners of the invented model of tests/nodal_fd.py: the load of each output (F).
CORNERS = {"light": CM_LIMITED.with_(cl=5e-12), "heavy": CM_LIMITED.with_(cl=15e-12)}


def _job(folder: Path) -> dict:
    """A tune job of the model where the common-mode loop limits (as tests/test_fd_tune.py)."""
    data = fd_job(folder, CM_LIMITED)
    data["feedback"]["load"] = "{cl}"
    data["compensation"] = {"cc": {"param": "cc", "min": "0.2e-12", "max": "5e-12"},
                            "rc": {"param": "rc", "min": "0", "max": "5e3"}}
    data["target"] = {"phase_margin": TARGET_PM, "common_mode_phase_margin": CM_TARGET_PM,
                      "tolerance": 1.0}
    data["corners"] = [{"name": name, "params": {"cl": model.cl}}
                       for name, model in CORNERS.items()]
    return data


def pdf_pages(pdf: Path) -> list[str]:
    """The text of each page (pdftotext -layout ends every page with a form feed)."""
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True,
                          text=True, check=True).stdout
    return text.split("\f")[:-1]


def flat(page: str) -> list[str]:
    """The page's lines with their runs of spaces made one."""
    return [" ".join(line.split()) for line in page.splitlines()]


@pytest.fixture(scope="module")
def fd_out(tmp_path_factory):
    """A tuned fully-differential out folder of two corners, report drawn (no PNGs)."""
    folder = tmp_path_factory.mktemp("fd_report")
    job = load_job(_job(folder), base=folder)
    result = tune(job, out=folder / "out", workers=2, time_domain=False)
    assert result.status == "converged", result.outcome.message
    # the report rebuilds the loop gains with the readout the run used
    assert readout_for(job.analysis.probe, ["differential", "common_mode"]) == loop_readout(job)
    build_report(folder / "out", pngs=False)
    return folder / "out"


def test_the_report_data_rebuilds_both_loops_as_the_run_read_them(fd_out):
    """From the journal alone, each corner's final loop gains give the margins results.json
    has for both loops (the same pure functions on the same vectors: to 1e-9)."""
    results = json.loads((fd_out / "results.json").read_text())
    with load_report_data(fd_out) as data:
        assert data.common_mode and set(data.cm_finals) == set(CORNERS) == set(data.cm_maps)
        for corner in results["corners"]:
            dm = loop_margins(data.finals[corner["name"]])
            cm = loop_margins(data.cm_finals[corner["name"]])
            assert dm.phase_margin_deg == pytest.approx(corner["phase_margin_deg"], abs=1e-9)
            assert cm.phase_margin_deg == pytest.approx(
                corner["common_mode"]["phase_margin_deg"], abs=1e-9)
            assert cm.unity_gain_hz == pytest.approx(corner["common_mode"]["unity_gain_hz"],
                                                     rel=1e-9)
        assert data.limiting_loop == "common_mode"
        assert data.limiting_corner == results["worst"]["common_mode"]["phase_margin_corner"]


@needs_poppler
def test_summary_lists_the_common_mode_margins_and_the_loop_that_limits(fd_out):
    """The summary's text against results.json: a row per corner with its common-mode
    unity-gain frequency, phase and gain margin after the differential figures; the CM
    target on the Target line; the limiting mark, naming the CM loop, on the row of the
    corner with the smallest CM phase margin only (the CM loop limits this model: its
    worst margin sits on its target, the differential one above its own)."""
    results = json.loads((fd_out / "results.json").read_text())
    worst = results["worst"]
    assert worst["common_mode"]["phase_margin_deg"] - CM_TARGET_PM \
        < worst["phase_margin_deg"] - TARGET_PM
    summary = pdf_pages(fd_out / "report.pdf")[0]
    lines = flat(summary)
    target = next(line for line in lines if line.startswith("Target:"))
    assert f"common-mode loop: worst-corner phase margin ≥ {CM_TARGET_PM:g}°" in target
    limiting = worst["common_mode"]["phase_margin_corner"]
    for corner in results["corners"]:
        row = next(line for line in lines if line.split()[:1] == [corner["name"]])
        marked = row.split()[1:4] == ["◀", "limiting", "(CM)"]
        assert marked == (corner["name"] == limiting), row
        cm = corner["common_mode"]
        def shown(gm):  # a dash where the phase never reaches −180°
            return "–" if gm is None else f"{gm:.1f}"

        figures = (f"{shown(corner['gain_margin_db'])} {si(cm['unity_gain_hz'], 'Hz', 3)} "
                   f"{cm['phase_margin_deg']:.2f} {shown(cm['gain_margin_db'])}")
        assert figures in row, (row, figures)


@needs_poppler
def test_corner_pages_show_both_loops_margins_as_the_exact_model_has_them(fd_out):
    """Each corner page names the differential loop's final curve and the common-mode
    loop's, and under the "common-mode loop" heading gives its phase margin; that margin is
    the exact nodal model's at the chosen values (within 0.02°: the page prints 0.01°, the
    simulated sweep has 100 points per decade), and the differential one is results.json's."""
    results = json.loads((fd_out / "results.json").read_text())
    values = results["values"]
    pages = pdf_pages(fd_out / "report.pdf")
    f = np.logspace(0, 10, 2001)
    for corner in results["corners"]:
        page = next(p for p in pages if p.lstrip().startswith(f"Corner {corner['name']}"))
        lines = flat(page)
        for legend in ("differential loop, final: Cc =", "common-mode loop, final"):
            assert any(legend in line for line in lines), legend
        # the side panel's headings end their lines (a tick label may start them)
        heading = next(i for i, line in enumerate(lines) if line.endswith(" common-mode loop")
                       or line == "common-mode loop")
        assert any(line.endswith("final values: differential loop")
                   for line in lines[:heading])
        dm_pm, cm_pm = [float(m) for m in re.findall(r"(?:^| )phase margin (\d+\.\d\d)°$",
                                                      "\n".join(lines), re.MULTILINE)]
        assert dm_pm == pytest.approx(corner["phase_margin_deg"], abs=0.005)
        exact = CORNERS[corner["name"]].with_(cc=values["cc"], rc=values["rc"])
        reference, _, _ = dense_margins(f, common_mode_loop_gain(exact, f)[None, :])
        assert cm_pm == pytest.approx(float(reference[0]), abs=0.02), corner["name"]
        assert any(line.endswith(f"phase margin {cm_pm:.2f}°") for line in lines[heading:])
        assert ("limiting corner" in lines[0]) == (
            corner["name"] == results["worst"]["common_mode"]["phase_margin_corner"])


@needs_poppler
def test_map_page_names_the_common_mode_region_and_the_limiting_loop(fd_out):
    """The map's legend has the common-mode loop's region with its target, and its title
    the loop that limits."""
    page = next(p for p in pdf_pages(fd_out / "report.pdf")
                if "Compensation map of the limiting corner" in p)
    text = " ".join(page.split())
    assert f"common-mode loop meets its target (≥ {CM_TARGET_PM:g}°)" in text
    assert "the common-mode loop limits" in text
    assert "feasible: green and hatched" in text


def test_without_targets_the_smaller_phase_margin_limits():
    """A measure run (no target, no worst block; invented figures): the loop with the
    smaller phase margin over the corners limits, whichever loop that is."""
    def data(cm_pm: float) -> ReportData:
        corners = [{"name": n, "phase_margin_deg": pm, "unity_gain_hz": 1e7,
                    "gain_margin_db": 20.0, "common_mode": {"phase_margin_deg": cm_pm + d,
                                                            "unity_gain_hz": 2e7,
                                                            "gain_margin_db": 9.0}}
                   for n, pm, d in (("a", 50.0, 5.0), ("b", 55.0, 0.0))]
        results = {"command": "measure", "loops": ["differential", "common_mode"],
                   "corners": corners, "worst": None}
        return ReportData(out=Path("."), results=results, corner_names=["a", "b"])

    assert (data(40.0).limiting_loop, data(40.0).limiting_corner) == ("common_mode", "b")
    assert (data(52.0).limiting_loop, data(52.0).limiting_corner) == ("differential", "a")


@needs_poppler
def test_a_single_ended_report_says_nothing_of_a_common_mode_loop(tmp_path):
    """A tuned single-ended amplifier (the macromodel of tests/nodal.py, two loads): no
    "common-mode" and no "CM" anywhere in its report, the limiting mark bare."""
    from conftest import write_macro_job

    job = write_macro_job(tmp_path / "job", Macromodel(), {"c1": 1e-12, "c2": 4e-12},
                          extra="[target]\nphase_margin = 60\n")
    out = tmp_path / "out"
    assert main(["tune", str(job), "--out", str(out), "--quiet", "--no-report"]) == 0
    build_report(out, pngs=False)
    text = "\f".join(pdf_pages(out / "report.pdf"))
    assert "common-mode" not in text and not re.search(r"\bCM\b", text)
    assert "differential loop" not in text
    summary = flat(text.split("\f")[0])
    assert any(line.split()[1:3] == ["◀", "limiting"] and line.split()[3][0].isdigit()
               for line in summary if line.split()[:1] in (["c1"], ["c2"]))
