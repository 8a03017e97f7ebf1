"""Each corner's DC operating point, and the corners whose margins describe a broken one.

The broken operating points are built here: the demo amplifier (invented level-1 cards)
with a resistor from its inverting input to ground, which the 1 GΩ dc_path cannot hold
against, and the public 45 nm predictive (PTM) cards in the ptm45 example, whose gate
leakage through a 30 MΩ dc_path pulls the output towards ground. References: Ohm's law
for where the leak puts the output, ngspice's own ``op`` analysis for the operating
point, and the BSIM4 / level-1 saturation condition |VDS| ≥ VDSAT as ngspice reports it.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess
from pathlib import Path

import pytest
from conftest import DEMO, REPO

from amploop.bench.requests import AnalysisRequest, Step
from amploop.bench.testbench import build_testbench
from amploop.cli import main
from amploop.corners.measure import measure
from amploop.errors import JobError
from amploop.sim.ngspice import NgspiceSession
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

needs_poppler = pytest.mark.skipif(shutil.which("pdftotext") is None,
                                   reason="poppler-utils (pdftotext) not installed; "
                                   "scripts/setup installs it")


def demo_variant(folder: Path, *, netlist_lines: str = "", job_extra: str = "",
                 corners: int | None = None, swap_inputs: bool = False) -> Path:
    """A copy of the demo in ``folder``: ``netlist_lines`` added inside the subckt,
    ``job_extra`` appended to the job (before the corners), only the first ``corners``
    corners, in_p and in_n exchanged with ``swap_inputs``. Returns the job file."""
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("models.lib", "two_stage.cir"):
        shutil.copy(DEMO / name, folder / name)
    netlist = (folder / "two_stage.cir").read_text()
    netlist = netlist.replace(".ends two_stage", f"{netlist_lines}\n.ends two_stage")
    (folder / "two_stage.cir").write_text(netlist)
    job = (DEMO / "job.toml").read_text()
    head, *blocks = job.split("[[corners]]")
    if corners is not None:
        blocks = blocks[:corners]
    if swap_inputs:
        assert 'in_p = "inp"\nin_n = "inn"' in head
        head = head.replace('in_p = "inp"\nin_n = "inn"', 'in_p = "inn"\nin_n = "inp"')
    text = head + job_extra + "\n" + "".join("[[corners]]" + b for b in blocks)
    path = folder / "job.toml"
    path.write_text(text)
    return path


#: From the demo's inverting input to ground inside the subckt: with the 1 GΩ dc_path,
#: holding inn at the 0.9 V common mode would need the output at 0.9 V·(1 + 1G/1G) =
#: 1.8 V (Ohm's law), at or above the 1.71–1.89 V supplies: the loop cannot hold it.
LEAK_1G = "Rleak inn vss 1G"


def test_a_leak_that_pulls_the_output_to_a_rail_is_suspect_never_ok(tmp_path):
    """Today's code printed tt_27c_1v8 of this circuit as "ok" with a 14.9 dB DC loop gain
    and a 90° phase margin; every corner that gave margins must now be "suspect", with
    its output near vdd (Ohm's law above), and none "ok"."""
    job = load_job(demo_variant(tmp_path / "leak", netlist_lines=LEAK_1G))
    result = measure(job, out=tmp_path / "out", time_domain=False)
    statuses = {c.corner.name: c.status for c in result.corners}
    assert "ok" not in statuses.values()
    assert statuses["tt_27c_1v8"] == "suspect"
    for c in result.corners:
        vdd = c.corner.params["vdd"]
        op = c.operating_point
        assert op is not None and op.common_mode_v == pytest.approx(0.9)
        assert op.output_v > 0.9 + 0.1 * vdd  # far above the common mode, towards vdd
        assert op.supply_span_v == pytest.approx(vdd)
        if c.margins is not None and c.margins.unity_gain_hz is not None:
            assert c.status == "suspect"
            assert "common mode" in c.suspect_reason and c.error is None
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert data["status"] == "failed"  # three corners give no margins at all
    tt = next(c for c in data["corners"] if c["name"] == "tt_27c_1v8")
    assert tt["status"] == "suspect" and "common mode" in tt["suspect_reason"]
    assert tt["operating_point"]["output_v"] > 1.6


def test_the_operating_point_read_from_the_ac_analysis_is_ngspices_op(tmp_path):
    """The output, inverting input and device voltages amploop reads from the AC
    analysis's kept operating point equal those of a separate ngspice ``op`` analysis of
    the same deck (reference: ngspice's own operating-point analysis)."""
    from amploop.bench.amplifier import prepare_amplifier

    job = load_job(demo_variant(tmp_path / "leak", netlist_lines=LEAK_1G, corners=1))
    amplifier = prepare_amplifier(job)
    bench = build_testbench(amplifier, job.corners[0], {})
    session = NgspiceSession()
    output = session.run(bench.request(60.0))
    op = bench.operating_point(output)
    names = ("v(tb_out)", "v(tb_inn)", "@m.x1.m1[vds]", "@m.x1.m1[vdsat]", "@m.x1.m6[vds]",
             "@m.x1.m6[vdsat]")
    plain = session.run(AnalysisRequest("op", bench.deck, (Step("op", names),))).reads[0]
    assert op.output_v == pytest.approx(float(plain["v(tb_out)"][0]), abs=1e-9)
    assert op.inverting_input_v == pytest.approx(float(plain["v(tb_inn)"][0]), abs=1e-9)
    m1, m6 = op.devices
    assert (m1.name, m6.name) == ("M1", "M6")
    assert m1.vds_v == pytest.approx(float(plain["@m.x1.m1[vds]"][0]), abs=1e-9)
    assert m6.vdsat_v == pytest.approx(float(plain["@m.x1.m6[vdsat]"][0]), abs=1e-9)
    assert m1.saturated == (abs(plain["@m.x1.m1[vds]"][0]) >= abs(plain["@m.x1.m1[vdsat]"][0]))


def test_a_healthy_amplifier_stays_ok_with_its_output_at_the_common_mode(tmp_path):
    """The demo as shipped: every corner ok, its output within a millivolt of the common
    mode and both named devices saturated (the demo's netlist says it keeps every device
    saturated at every corner)."""
    job = load_job(demo_variant(tmp_path / "demo"))
    result = measure(job, time_domain=False)
    assert [c.status for c in result.corners] == ["ok"] * len(job.corners)
    for c in result.corners:
        assert abs(c.operating_point.output_shift_v) < 1e-3
        assert [d.region for d in c.operating_point.devices] == ["saturation", "saturation"]


def test_gate_leakage_of_45nm_cards_through_a_30_megohm_dc_path_is_suspect(tmp_path):
    """The ptm45 example with dc_path = 30 MΩ: at 27 °C the PTM cards' gate leakage pulls
    the output about 0.26 V below the 0.3 V common mode and M6 into triode; today's code
    printed those corners "ok" at 6–10 dB of DC loop gain and 117–148° of phase margin.
    At 125 °C the same circuit stays within the limit and stays ok."""
    folder = tmp_path / "ptm45"
    folder.mkdir()
    shutil.copy(REPO / "netlists" / "ptm45" / "two_stage_45.cir", folder)
    text = (REPO / "netlists" / "ptm45" / "job.toml").read_text()
    text = text.replace('dc_path = "1meg"', 'dc_path = "30meg"')
    # the public 45 nm predictive cards, as the example ships them (a copy of ../shared's)
    text = re.sub(r'models = ".*"', f'models = "{REPO / "netlists/ptm45/ptm45_bulk.lib"}"', text)
    (folder / "job.toml").write_text(text)
    job = load_job(folder / "job.toml")
    result = {c.corner.name: c for c in measure(job, time_domain=False).corners}
    for name in ("t27_1v1_1p", "t27_0v99_2p", "t27_1v21_0p5"):
        corner = result[name]
        assert corner.status == "suspect", (name, corner.status)
        assert corner.operating_point.output_shift_v < -0.2
        m6 = corner.operating_point.devices[1]
        assert m6.name == "M6" and m6.region == "triode" and abs(m6.vds_v) < abs(m6.vdsat_v)
        assert "M6 (second_stage_device) is in triode" in corner.suspect_reason
    for name in ("t125_0v99_2p", "t125_1v21_0p5", "t125_1v21_2p"):
        assert result[name].status == "ok"
    assert not any("swapped" in (c.problem or "") for c in result.values())


def test_the_swapped_inputs_hint_needs_the_operating_point_to_show_it(tmp_path):
    """Inputs really swapped: the loop latches with the output and the inverting input
    both near ground, and the message asks about in_p and in_n. A leak that drives the
    output to the upper rail with the inverting input below the common mode is the other
    case: today's code asked about swapped inputs there too (three corners of LEAK_1G)."""
    swapped = measure(load_job(demo_variant(tmp_path / "swap", swap_inputs=True, corners=3)),
                      time_domain=False)
    for c in swapped.corners:
        assert c.status == "error"
        assert "are in_p and in_n swapped?" in c.error
        op = c.operating_point
        assert op.output_shift_v < -0.5 and op.inverting_input_v - op.common_mode_v < -0.5
    leak = measure(load_job(demo_variant(tmp_path / "leak", netlist_lines=LEAK_1G)),
                   time_domain=False)
    assert [c for c in leak.corners if c.status == "error"]  # the corners that hinted
    for c in leak.corners:
        assert "swapped" not in (c.problem or "")
        assert c.status == "ok" or "operating point is broken" in c.problem


def test_the_limits_are_set_in_the_job_file(tmp_path):
    """[operating_point]: a DC loop gain limit above the demo's 62–72 dB makes every
    corner suspect on that ground alone; a wider output window lets a 2 GΩ leak's output
    (0.9 V·(1 + 1G/2G) = 1.35 V, 0.45 V above the common mode: 25 % of 1.8 V) pass at
    tt_27c_1v8. Bad values are one-line job errors."""
    strict = load_job(demo_variant(tmp_path / "strict", corners=2,
                                   job_extra="[operating_point]\nmin_dc_loop_gain = 75\n"))
    for c in measure(strict, time_domain=False).corners:
        assert c.status == "suspect"
        assert "min_dc_loop_gain" in c.suspect_reason
    leak = "Rleak inn vss 2G"
    narrow = load_job(demo_variant(tmp_path / "narrow", corners=1, netlist_lines=leak))
    wide = load_job(demo_variant(tmp_path / "wide", corners=1, netlist_lines=leak,
                                 job_extra="[operating_point]\nmax_output_shift = 0.3\n"))
    (narrow_c,), (wide_c,) = (measure(j, time_domain=False).corners for j in (narrow, wide))
    assert narrow_c.operating_point.output_v == pytest.approx(1.35, abs=0.02)
    assert (narrow_c.status, wide_c.status) == ("suspect", "ok")
    for bad, what in (("max_output_shift = 2", "share of the supply span"),
                      ("max_output_shfit = 0.2", "did you mean")):
        path = demo_variant(tmp_path / "bad", corners=1, job_extra=f"[operating_point]\n{bad}\n")
        with pytest.raises(JobError) as info:
            load_job(path)
        assert what in str(info.value) and "\n" not in str(info.value)
        assert "[operating_point]" in str(info.value)


def test_tune_refuses_to_converge_on_a_broken_operating_point(tmp_path):
    """A 2 GΩ leak leaves every corner with margins and a DC loop gain near 60 dB, but the
    output 0.45 V above the common mode (Ohm's law, as above): today's code tuned it to
    "converged". Now tune ends "failed", naming the suspect corner and why."""
    job = load_job(demo_variant(tmp_path / "leak", corners=3, netlist_lines="Rleak inn vss 2G"))
    result = tune(job, out=tmp_path / "out", time_domain=False)
    assert result.status == "failed"
    assert "is suspect" in result.outcome.message and "common mode" in result.outcome.message
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert data["status"] == "failed"
    assert {c["status"] for c in data["corners"]} == {"suspect"}


@needs_poppler
def test_gmin_stepping_is_explained_once_and_marked_on_the_table_and_the_report(tmp_path, capsys):
    """ngspice's ``noopiter`` option sends every operating point straight to gmin stepping
    (ngspice manual, .options). Today's code printed one bare warning line per corner and
    a report where nothing showed it. Now: one warning line naming the corners and saying
    what it means and what to check, "gmin" in the status column of the terminal table,
    of the report's summary table and on the corner page with the explanation."""
    job = demo_variant(tmp_path / "gmin", corners=2, netlist_lines=".options noopiter")
    code = main(["measure", str(job), "--out", str(tmp_path / "out")])
    captured = capsys.readouterr()
    assert code == 0
    gmin_lines = [line for line in captured.err.splitlines() if "gmin stepping" in line]
    assert len(gmin_lines) == 1
    assert "all 2 corners" in gmin_lines[0] and "DC path" in gmin_lines[0]
    rows = [line for line in captured.out.splitlines() if line.startswith(("tt_", "ss_"))]
    assert len(rows) == 2 and all(line.rstrip().endswith("ok gmin") for line in rows)
    pdf = tmp_path / "out" / "report.pdf"
    text = subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True,
                          text=True, check=True).stdout
    summary, first_corner = text.split("\f")[:2]
    assert summary.count("ok gmin") == 2
    assert "gmin stepping at 2 of 2 corners" in " ".join(summary.split())
    assert "operating point needed gmin stepping" in first_corner
    assert "DC path" in " ".join(first_corner.split())


@needs_poppler
def test_suspect_is_shown_on_the_terminal_the_report_and_in_the_exit_code(tmp_path, capsys):
    """measure on the 2 GΩ leak: the table says SUSPECT, stderr gives the reason, the exit
    code is 1 (not the 0 of a good measurement), results.json's status is "suspect", and
    the report's summary and corner page say SUSPECT with the reason."""
    job = demo_variant(tmp_path / "leak", corners=1, netlist_lines="Rleak inn vss 2G")
    code = main(["measure", str(job), "--out", str(tmp_path / "out")])
    captured = capsys.readouterr()
    assert code == 1
    assert "SUSPECT" in captured.out
    assert "amploop: suspect: corner tt_27c_1v8: " in captured.err
    assert json.loads((tmp_path / "out" / "results.json").read_text())["status"] == "suspect"
    text = subprocess.run(["pdftotext", "-layout", str(tmp_path / "out" / "report.pdf"), "-"],
                          capture_output=True, text=True, check=True).stdout
    summary, corner = text.split("\f")[:2]
    assert "SUSPECT" in summary and "SUSPECT" in corner
    assert "common mode" in " ".join(corner.split())
