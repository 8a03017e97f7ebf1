"""The report and its time-domain evidence.

References: the second-order relations between phase margin, damping and overshoot
(K. Ogata, "Modern Control Engineering", ch. 5 and 7), the exact settling of a one-pole
loop, ln(1/ε)·τ (first-order step response e^(−t/τ); common practice), poppler's
pdftotext and pdftoppm for what the PDF holds.
"""

from __future__ import annotations

import json
import math
import shutil
import sqlite3
import subprocess

import numpy as np
import pytest
from conftest import DEMO, write_macro_job
from nodal import Macromodel

from amploop.analysis.timedomain import (
    damping_from_phase_margin,
    overshoot_from_damping,
    step_metrics,
)
from amploop.cli import main
from amploop.corners.measure import measure
from amploop.spec.job import load_job

needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None,
                                   reason="poppler-utils (pdftotext, pdftoppm) not installed; "
                                   "scripts/setup installs it")


def test_damping_and_overshoot_relations_match_tabulated_values():
    """Ogata's second-order relations, at values a designer knows by heart (common
    practice): ζ = 0.5 gives 16.3 % overshoot and about 51.8° of phase margin."""
    assert overshoot_from_damping(0.5) == pytest.approx(16.30, abs=0.01)
    pm = math.degrees(math.atan(2 * 0.5 / math.sqrt(math.sqrt(1 + 4 * 0.5**4) - 2 * 0.5**2)))
    assert pm == pytest.approx(51.83, abs=0.01)
    assert damping_from_phase_margin(pm) == pytest.approx(0.5, abs=1e-6)
    assert overshoot_from_damping(1.0) == 0.0


def test_step_metrics_of_a_sampled_first_order_step():
    """e^(−t/τ) sampled finely: settles to 0.1 % at ln(1000)·τ, no overshoot."""
    tau = 1e-8
    t = np.linspace(0, 20 * tau, 200001)
    step_at = tau
    v = np.where(t < step_at, 0.0, 1 - np.exp(-(t - step_at) / tau))
    m = step_metrics(t, v, step_at, band=1e-3)
    assert m.overshoot_pct < 1e-4  # the final value is the mean of the last 5 %: 1e-8 low
    assert m.settling_s == pytest.approx(math.log(1000) * tau, rel=1e-3)


@pytest.mark.parametrize("cc", [0.12e-12, 0.18e-12, 0.3e-12])
def test_overshoot_follows_the_phase_margin_of_a_near_second_order_loop(cc, tmp_path):
    """Two-pole macromodel with its right-half-plane zero cancelled (Rc = 1/gm2) and the
    first pole far below crossover: the closed loop is close to second order, so the
    simulated overshoot matches exp(−πζ/√(1−ζ²)) with ζ from the measured phase margin
    (Ogata). Tolerance 0.1 percentage points (the loop's finite DC gain and its third,
    distant pole make it not exactly second order; measured when this test was written:
    0.077 points at 45°, 0.066 at 54°, 0.035 at 64°)."""
    model = Macromodel(kind="resistive", z_in=10e3, z_fb=10e3, gm1=100e-6, r1=10e6, c1=5e-15,
                       gm2=0.5e-3, r2=100e3, c2=10e-15, cc=cc, rc=1 / 0.5e-3, cl=2e-12)
    job = load_job(write_macro_job(tmp_path / "job", model, extra='[transient]\nstep = "1m"\n'))
    result = measure(job, out=tmp_path / "out", workers=1)
    corner = result.corners[0]
    check = result.step_checks[corner.corner.name].metrics
    pm = corner.margins.phase_margin_deg
    expected = overshoot_from_damping(damping_from_phase_margin(pm))
    assert 35 < pm < 70
    assert check.overshoot_pct == pytest.approx(expected, abs=0.1)


def test_one_pole_loop_settles_in_ln_1000_tau(tmp_path):
    """A single-stage transconductor in a resistive loop has one pole; its closed-loop
    time constant by hand: τ = C/(1/R + 1/(Rin+Rfb) + gm·Rin/(Rin+Rfb)), C = Cout + CL.
    Settling to 0.1 % takes ln(1000)·τ (exact for one pole); within 1 %."""
    gm, r, c_out, cl, r_in, r_fb = 200e-6, 1e6, 50e-15, 1e-12, 10e3, 30e3
    tau = (c_out + cl) / (1 / r + 1 / (r_in + r_fb) + gm * r_in / (r_in + r_fb))
    folder = tmp_path / "job"
    folder.mkdir()
    (folder / "ota.cir").write_text(f"""* one-pole transconductor (test data, invented)
.subckt ota inp inn out params: cc=1f
G1 0 out inp inn {gm!r}
R1 out 0 {r!r}
C1 out 0 {c_out!r}
Cdummy out 0 {{cc}}
.ends
""")
    (folder / "job.toml").write_text(f"""name = "one-pole"
[amplifier]
netlist = "ota.cir"
subckt = "ota"
in_p = "inp"
in_n = "inn"
out = "out"
[bias]
common_mode = "0.5"
[feedback]
kind = "resistive"
input = "{r_in!r}"
feedback = "{r_fb!r}"
load = "{cl!r}"
[compensation]
cc = {{ param = "cc" }}
[transient]
step = "1m"
stop = "{20 * tau!r}"
[operating_point]
min_dc_loop_gain = 3   # this loop's DC loop gain, gm·(R ∥ 40 kΩ)·1/4 = 5.7 dB, is by design
""")
    result = measure(load_job(folder / "job.toml"), out=tmp_path / "out", workers=1,
                     overrides={"cc": 1e-18})
    check = result.step_checks["nominal"].metrics
    assert check.overshoot_pct < 0.05
    assert check.settling_s == pytest.approx(math.log(1000) * (tau + 1e-18 / (
        1 / r + 1 / (r_in + r_fb) + gm * r_in / (r_in + r_fb))), rel=0.01)


@pytest.fixture(scope="module")
def demo_report(tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "out"
    code = main(["tune", str(DEMO / "job.toml"), "--out", str(out), "--quiet"])
    assert code == 0
    return out


_PREFIXES = {-15: "f", -12: "p", -9: "n", -6: "µ", -3: "m", 0: "", 3: "k", 6: "M", 9: "G"}


def si(value: float, unit: str, digits: int) -> str:
    """``value`` with an SI prefix and ``digits`` significant digits, as the report prints
    it (written here, not taken from amploop): si(2.928e-13, "F", 4) == "292.8 fF"."""
    exponent = 3 * math.floor(math.log10(abs(value)) / 3)
    return f"{value / 10**exponent:.{digits}g} {_PREFIXES[exponent]}{unit}"


@needs_poppler
def test_report_holds_every_page_corner_and_value(demo_report):
    """The PDF's text (pdftotext -layout) against results.json: on the summary page the
    chosen values, the worst margin and its corner, and a row per corner with its DC loop
    gain, unity-gain frequency, phase and gain margins as printed (0.1 dB, 3 significant
    digits, 0.01°, 0.1 dB), the limiting corner marked on its row only; then a page per
    corner, in the same order, with the same figures and the final values, the limiting
    corner's page named so and no other."""
    pdf = demo_report / "report.pdf"
    assert pdf.is_file()
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True,
                          text=True, check=True).stdout
    results = json.loads((demo_report / "results.json").read_text())
    corners = results["corners"]
    pages = text.split("\f")[:-1]  # pdftotext ends every page with a form feed
    assert len(pages) == 1 + len(corners) + 3  # summary, corners, map, convergence, step
    for title in ("amploop report", "Compensation map of the limiting corner",
                  "How the tuning got there", "Closed-loop step response", "Cautions",
                  "only as good as the device models"):
        assert title in text
    pngs = sorted((demo_report / "report").glob("page-*.png"))
    assert len(pngs) == len(pages)

    cc, rc = si(results["values"]["cc"], "F", 4), si(results["values"]["rc"], "Ω", 4)
    assert (cc, rc) == ("292.8 fF", "20 kΩ")  # the demo's tuned values, as README shows
    summary = pages[0].splitlines()
    assert f"Chosen: Cc = {cc}, Rc = {rc}" in [line.strip() for line in summary]
    limiting = results["worst"]["phase_margin_corner"]
    assert limiting in {c["name"] for c in corners}
    worst_pm = f"{results['worst']['phase_margin_deg']:.2f}"
    assert f"worst-corner phase margin {worst_pm}° (corner {limiting})" in pages[0]
    assert worst_pm == f"{min(c['phase_margin_deg'] for c in corners):.2f}"

    rows = {}
    for line in summary:
        words = line.split()
        if words and words[0] in {c["name"] for c in corners}:
            rows[words[0]] = words[1:]
    assert list(rows) == [c["name"] for c in corners]
    for corner, page in zip(corners, pages[1:1 + len(corners)], strict=True):
        name, row = corner["name"], rows[corner["name"]]
        marked = row[:2] == ["◀", "limiting"]
        assert marked == (name == limiting), name
        row = row[2:] if marked else row
        pm = f"{corner['phase_margin_deg']:.2f}"
        unity = si(corner["unity_gain_hz"], "Hz", 3)
        gm = f"{corner['gain_margin_db']:.1f}"
        assert row[:5] == [f"{corner['dc_loop_gain_db']:.1f}", *unity.split(), pm, gm], name
        title = page.strip().splitlines()[0]
        assert title.split()[:2] == ["Corner", name]
        assert ("limiting corner" in title) == (name == limiting), name
        lines = [" ".join(line.split()) for line in page.splitlines()]
        for shown in (f"phase margin {pm}°", f"unity-gain frequency {unity}",
                      f"gain margin {gm} dB", f"final: Cc = {cc}, Rc = {rc}"):
            assert any(shown in line for line in lines), (name, shown)


@needs_poppler
def test_every_page_has_ink(demo_report, tmp_path):
    """Rasterised with pdftoppm, no page is blank (a blank page is all white)."""
    subprocess.run(["pdftoppm", "-r", "30", "-gray", str(demo_report / "report.pdf"),
                    str(tmp_path / "page")], check=True)
    images = sorted(tmp_path.glob("page-*.pgm"))
    assert images
    for image in images:
        data = image.read_bytes()
        # PGM: header of three lines, then one byte per pixel
        pixels = np.frombuffer(data.split(b"\n", 3)[3], dtype=np.uint8)
        assert (pixels < 200).mean() > 0.002, f"{image.name} looks blank"


@needs_poppler
def test_report_command_simulates_nothing_and_draws_the_same(demo_report, capsys):
    journal = demo_report / "journal.sqlite"

    def count() -> int:
        with sqlite3.connect(f"file:{journal}?mode=ro", uri=True) as db:
            return db.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]

    def pdf_text() -> list[str]:
        text = subprocess.run(["pdftotext", "-layout", str(demo_report / "report.pdf"), "-"],
                              capture_output=True, text=True, check=True).stdout
        # everything but the line that carries the date and time of drawing
        return [line for line in text.splitlines() if "corners tuned with" not in line]

    before, first = count(), pdf_text()
    code = main(["report", str(demo_report)])
    assert code == 0
    assert "report:" in capsys.readouterr().out
    assert count() == before
    assert pdf_text() == first


def test_report_of_a_folder_without_results_is_one_line(tmp_path, capsys):
    code = main(["report", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1 and "results.json" in err


def test_report_of_an_older_results_json_says_to_run_again_in_one_line(tmp_path, capsys):
    """A results.json of schema 1 names its journal keys as ``analysis``: refused, with
    what to do, before the journal is opened."""
    (tmp_path / "results.json").write_text(json.dumps(
        {"schema": 1, "command": "measure", "job": "old", "status": "ok", "corners": []}))
    code = main(["report", str(tmp_path)])
    err = capsys.readouterr().err
    assert code == 2
    assert len(err.strip().splitlines()) == 1, err
    assert "results.json" in err and "schema 1" in err and "again" in err
    assert "Traceback" not in err


def test_report_reads_a_journal_in_a_folder_whose_name_looks_like_a_uri(macro_job, tmp_path,
                                                                        capsys):
    """A folder named with ``?``, ``#`` and ``%`` (characters that mean something in the
    SQLite URI the report opens the journal with) still gives the same report, and a
    closed journal is read without leaving SQLite's side files behind."""
    out = tmp_path / "run ?a=1 #2 %41"
    assert main(["measure", str(macro_job()), "--out", str(out), "--quiet"]) == 0
    capsys.readouterr()
    assert main(["report", str(out)]) == 0
    assert "report:" in capsys.readouterr().out
    assert (out / "report.pdf").stat().st_size > 0
    assert not list(out.glob("journal.sqlite-*"))


@needs_poppler
def test_report_after_no_report_says_the_step_checks_were_not_run_and_the_command(tmp_path,
                                                                                  capsys):
    """measure --no-report, then report: the step page says the checks were not run and
    names a command; that command, run as printed, simulates only the 10 step transients
    (every AC analysis reused) and the page then shows them."""
    import shlex

    out = tmp_path / "out"
    assert main(["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report",
                 "--quiet"]) == 0
    assert main(["report", str(out), "--no-png"]) == 0
    capsys.readouterr()
    text = subprocess.run(["pdftotext", "-layout", str(out / "report.pdf"), "-"],
                          capture_output=True, text=True, check=True).stdout
    page = text.split("\f")[-2]  # the last page (pdftotext ends every page with \f)
    assert "Closed-loop step response" in page and "step checks were not run" in page
    shown = page.split("draws this report again:", 1)[1]
    command = shlex.split(" ".join(line.strip() for line in shown.splitlines() if line.strip()))
    assert command[:2] == ["amploop", "measure"]
    assert main([*command[1:], "--quiet"]) == 0
    results = json.loads((out / "results.json").read_text())
    assert results["ac_analyses"] == {"run": 0, "reused": 20}
    assert results["transient_analyses"] == {"run": 10, "reused": 0}
    text = subprocess.run(["pdftotext", "-layout", str(out / "report.pdf"), "-"],
                          capture_output=True, text=True, check=True).stdout
    assert "not run" not in text and "slowest to settle" in text
