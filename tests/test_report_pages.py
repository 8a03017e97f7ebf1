"""The report of many corners: which pages it has, its progress, and memory that does not
grow with the corners.

What the PDF holds is read back with poppler's pdftotext; memory is Python's own count of
the bytes it allocated (tracemalloc).
"""

from __future__ import annotations

import io
import json
import shutil
import subprocess
import tracemalloc

import numpy as np
import pytest
from nodal import Macromodel

from amploop.cli import main
from amploop.report.data import load_report_data
from amploop.report.selection import EVERY_CORNER_UP_TO, WORST_PAGES

needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None,
                                   reason="poppler-utils (pdftotext, pdftoppm) not installed; "
                                   "scripts/setup installs it")

CORNERS = 60
assert CORNERS > EVERY_CORNER_UP_TO


def _loads(count: int) -> dict[str, float]:
    """Corner name -> load capacitance, F: from 0.5 pF to 8 pF, in a shuffled order."""
    loads = np.geomspace(0.5e-12, 8e-12, count)
    order = np.random.default_rng(7).permutation(count)
    return {f"c{i:03d}": float(loads[j]) for i, j in enumerate(order)}


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    """A measured out folder of 60 corners of the linear macromodel, report drawn."""
    from conftest import write_macro_job

    folder = tmp_path_factory.mktemp("many")
    job = write_macro_job(folder / "job", Macromodel(cc=1.5e-12, rc=800.0), _loads(CORNERS))
    out = folder / "out"
    assert main(["measure", str(job), "--out", str(out), "--workers", "1", "--quiet"]) == 0
    return out


def pdf_pages(pdf) -> list[str]:
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True,
                          text=True, check=True).stdout
    return text.split("\f")[:-1]


def corner_page_names(pages: list[str]) -> list[str]:
    return [page.split("Corner ", 1)[1].split()[0] for page in pages
            if page.lstrip().startswith("Corner ")]


@needs_poppler
def test_above_the_count_an_overview_and_pages_for_the_worst_few_only(many):
    results = json.loads((many / "results.json").read_text())
    corners = results["corners"]
    by_pm = sorted(corners, key=lambda c: c["phase_margin_deg"])
    expected = {c["name"] for c in by_pm[:WORST_PAGES]}
    expected.add(min(corners, key=lambda c: c["unity_gain_hz"])["name"])
    gm = [c for c in corners if c["gain_margin_db"] is not None]
    if gm:
        expected.add(min(gm, key=lambda c: c["gain_margin_db"])["name"])
    pages = pdf_pages(many / "report.pdf")
    named = corner_page_names(pages)
    assert set(named) == expected and len(named) == len(expected)
    assert named == [c["name"] for c in corners if c["name"] in expected]  # the job's order
    limiting = [p for p in pages if p.lstrip().startswith(f"Corner {by_pm[0]['name']} ")]
    assert len(limiting) == 1 and "limiting corner" in limiting[0]
    overview = [p for p in pages if f"All {CORNERS} corners at a glance" in p]
    assert len(overview) == 1 and "--all-corner-pages" in overview[0]
    assert any(f"Corners 19–52 of {CORNERS}" in p for p in pages)  # the table has them all
    assert any("Closed-loop step response" in p and f"all {CORNERS} corners" in p
               for p in pages)
    summary = 1 + -(-(CORNERS - 18) // 34)
    assert len(pages) == summary + 1 + len(expected) + 1  # + overview, corner pages, steps


@needs_poppler
def test_corner_pages_named_on_the_command_line_and_all_of_them(many, capsys):
    results = json.loads((many / "results.json").read_text())
    best = max(results["corners"], key=lambda c: c["phase_margin_deg"])["name"]
    assert main(["report", str(many), "--no-png", "--corner-page", best]) == 0
    assert best in corner_page_names(pdf_pages(many / "report.pdf"))
    assert main(["report", str(many), "--no-png", "--all-corner-pages"]) == 0
    pages = pdf_pages(many / "report.pdf")
    assert corner_page_names(pages) == [c["name"] for c in results["corners"]]
    assert not any("corners at a glance" in p for p in pages)
    capsys.readouterr()
    assert main(["report", str(many), "--corner-page", "c1000"]) == 2
    line = capsys.readouterr().err.strip()
    assert "\n" not in line and "--corner-page" in line and "no corner 'c1000'" in line


class Terminal(io.StringIO):
    """stderr as a terminal: the progress lines are shown only there."""

    def isatty(self) -> bool:
        return True


def test_the_report_shows_its_progress_while_it_draws(many, capsys, monkeypatch):
    terminal = Terminal()
    monkeypatch.setattr("sys.stderr", terminal)
    assert main(["report", str(many), "--no-png"]) == 0
    out = capsys.readouterr().out
    pages = int(out.split("(", 1)[1].split()[0])
    shown = terminal.getvalue()
    for page in range(1, pages + 1):
        assert f"report: page {page}/{pages}" in shown, shown


def _peak_bytes_reading_every_corner(out) -> tuple[int, int]:
    """Peak bytes allocated while the report data is opened and every corner's figures
    (loop gains, step response) are read in turn, as the pages read them; and the bytes
    of one corner's arrays."""
    tracemalloc.start()
    try:
        with load_report_data(out) as data:
            one = 0
            for name in data.corner_names:
                curves = data.curves[name]
                step = data.steps.get(name)
                one = max(one, sum(c.response.values.nbytes + c.response.frequency_hz.nbytes
                                   for c in curves)
                          + (step.time_s.nbytes + step.output_v.nbytes if step else 0))
        return tracemalloc.get_traced_memory()[1], one
    finally:
        tracemalloc.stop()


def test_the_report_holds_a_few_corners_figures_at_a_time_not_all(many):
    """Before, every corner's loop gains and step response were read before the first page
    was drawn: 818 MiB for a 1,000-corner report."""
    peak, one = _peak_bytes_reading_every_corner(many)
    assert one > 0
    assert peak < 12 * one, (peak, one, CORNERS * one)
