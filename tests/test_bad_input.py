"""Bad input gets one line naming the file, the place and the problem, and exit code 2.

Simulator-side failures (an ngspice parse error, no DC operating point, a loop gain that
never crosses 0 dB) are per-corner errors in results.json while the other corners finish.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest
from nodal import Macromodel

from amploop.cli import main


def run(argv: list[str], capsys) -> tuple[int, str, str]:
    code = main(argv)
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def one_error_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, f"expected one line, got: {err!r}"
    assert "Traceback" not in err
    return lines[0]


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text()
    assert old in text, f"{old!r} not in {path}"
    path.write_text(text.replace(old, new))


@pytest.fixture
def job(macro_job) -> Path:
    return macro_job(Macromodel(cc=1.5e-12, rc=800.0), corners={"light": 1e-12, "heavy": 5e-12})


def measure_args(job: Path, tmp_path: Path) -> list[str]:
    return ["measure", str(job), "--out", str(tmp_path / "out"), "--workers", "1"]


def test_missing_job_file(tmp_path, capsys):
    code, _, err = run(measure_args(tmp_path / "nope.toml", tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "nope.toml" in line and "not found" in line


def test_missing_netlist_file(job, tmp_path, capsys):
    edit(job, 'netlist = "macro.cir"', 'netlist = "gone.cir"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "job.toml" in line and "[amplifier].netlist" in line and "gone.cir" in line


def test_subckt_not_in_the_netlist(job, tmp_path, capsys):
    edit(job, 'subckt = "macro"', 'subckt = "macr"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "macro.cir" in line and "'macr'" in line and "did you mean 'macro'" in line


def test_port_not_among_the_subckt_ports(job, tmp_path, capsys):
    edit(job, 'in_n = "inn"', 'in_n = "in_minus"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "job.toml" in line and "[amplifier].in_n" in line and "in_minus" in line
    assert "inp inn out" in line


def test_unconnected_port(job, tmp_path, capsys):
    netlist = job.parent / "macro.cir"
    edit(netlist, ".subckt macro inp inn out", ".subckt macro inp inn out vdd")
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "'vdd'" in line and "not connected" in line and "[bias]" in line


def test_compensation_parameter_that_does_not_exist(job, tmp_path, capsys):
    edit(job, 'rc = { param = "rc"', 'rc = { param = "rz"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "macro.cir" in line and "[compensation].rc" in line and "'rz'" in line
    assert "did you mean 'rc'" in line


def test_compensation_element_that_does_not_exist(job, tmp_path, capsys):
    edit(job, 'cc = { param = "cc"', 'cc = { element = "Cx"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "macro.cir" in line and "'Cx'" in line and "did you mean" in line


def test_compensation_element_of_the_wrong_kind(job, tmp_path, capsys):
    edit(job, 'cc = { param = "cc"', 'cc = { element = "R1"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    assert "R1 is not a capacitor" in one_error_line(err)


def test_lib_section_that_does_not_exist(job, tmp_path, capsys):
    (job.parent / "models.lib").write_text(".lib tt\n.endl tt\n.lib ss\n.endl ss\n")
    edit(job, 'out = "out"', 'out = "out"\nmodels = "models.lib"')
    text = job.read_text().replace('name = "light"', 'name = "light"\nlib = "tt"')
    job.write_text(text.replace('name = "heavy"', 'name = "heavy"\nlib = "sf"'))
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "job.toml" in line and "heavy" in line and "'sf'" in line and "models.lib" in line


def test_toml_syntax_error_names_line_and_column(job, tmp_path, capsys):
    edit(job, 'subckt = "macro"', 'subckt = "macro')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "job.toml:4:" in line and "TOML syntax error" in line


@pytest.mark.parametrize("old, new, place, words", [
    ('subckt = "macro"', 'subckt = "macro"\nsubcircuit = "x"', "[amplifier].subcircuit",
     "did you mean 'subckt'"),
    ("[analysis]", "[analysys]", "analysys", "did you mean 'analysis'"),
    ('points_per_decade = 40', 'point_per_decade = 40', "[analysis].point_per_decade",
     "did you mean 'points_per_decade'"),
])
def test_unknown_key_gets_a_did_you_mean(job, tmp_path, capsys, old, new, place, words):
    edit(job, old, new)
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert place in line and words in line


@pytest.mark.parametrize("old, new, place", [
    ('input = "10000.0"', 'input = "10x"', "[feedback].input"),
    ('input = "10000.0"', 'input = "-10k"', "[feedback].input"),
    ('min = "0.1p"', 'min = "-0.1p"', "[compensation].cc.min"),
    ('start = "1"', 'start = "one"', "[analysis].start"),
    ('params = { cl = 1e-12 }', 'params = { cl = "1q" }', "[[corners]][0].params.cl"),
])
def test_unparseable_or_negative_values(job, tmp_path, capsys, old, new, place):
    edit(job, old, new)
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "job.toml" in line and place in line


def test_negative_load_from_a_corner_parameter_is_refused_before_simulating(job, tmp_path, capsys):
    edit(job, "params = { cl = 5e-12 }", "params = { cl = -5e-12 }")
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "[feedback].load" in line and "heavy" in line and "negative" in line
    assert not (tmp_path / "out").exists()


def test_bias_values_may_be_negative(macro_job, tmp_path, capsys):
    job = macro_job(Macromodel(cc=1.5e-12, rc=800.0))
    edit(job, 'common_mode = "0.9"', 'common_mode = "-0.4"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 0, err


def test_bad_set_value(job, tmp_path, capsys):
    code, _, err = run(measure_args(job, tmp_path) + ["--set", "cc=fast"], capsys)
    assert code == 2
    assert "--set 'cc=fast'" in one_error_line(err)
    code, _, err = run(measure_args(job, tmp_path) + ["--set", "ccomp=1p"], capsys)
    assert code == 2
    assert "did you mean 'cc'" in one_error_line(err)


def test_ngspice_parse_error_names_the_users_file_and_line(job, tmp_path, capsys):
    edit(job.parent / "macro.cir", "R2 out 0", "R2 out 0 {r2_typo} ; was")
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "macro.cir:7:" in line and "r2_typo" in line and "all 2 corners" in line
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert results["status"] == "failed"
    assert all(c["status"] == "error" and "r2_typo" in c["error"] for c in results["corners"])


def test_dc_operating_point_that_does_not_converge(job, tmp_path, capsys):
    """A behavioural source with no DC solution: exp(40·v) = v/1 kΩ has none."""
    edit(job.parent / "macro.cir", ".ends", "Bx 0 nx I=exp(40*v(nx))\nRx nx 0 1k\n.ends")
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 1
    line = one_error_line(err)
    assert "no DC operating point" in line
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert [c["status"] for c in results["corners"]] == ["error", "error"]
    assert results["corners"][0]["phase_margin_deg"] is None


def test_loop_gain_that_never_crosses_0_db(job, tmp_path, capsys):
    edit(job, 'stop = "10G"', 'stop = "10k"')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 1
    line = one_error_line(err)
    assert "never crosses 0 dB" in line and "all 2 corners" in line
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    corner = results["corners"][0]
    assert corner["status"] == "error" and corner["unity_gain_hz"] is None
    assert corner["dc_loop_gain_db"] > 40  # what could be read is kept


def test_one_failing_corner_never_loses_the_others(job, tmp_path, capsys):
    """Only the heavy corner switches on a behavioural source that has no DC solution."""
    edit(job, "params = { cl = 1e-12 }", "params = { cl = 1e-12, k = 0 }")
    edit(job, "params = { cl = 5e-12 }", "params = { cl = 5e-12, k = 1 }")
    edit(job.parent / "macro.cir", ".ends", "Bx 0 nx I={k}*exp(40*v(nx))\nRx nx 0 1k\n.ends")
    code, _out, err = run(measure_args(job, tmp_path), capsys)
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    statuses = {c["name"]: c["status"] for c in results["corners"]}
    assert statuses == {"light": "ok", "heavy": "error"}, results
    assert code == 1 and results["status"] == "failed"
    assert (tmp_path / "out" / "loop_gain" / "light.csv").is_file()
    assert results["corners"][0]["phase_margin_deg"] > 0
    line = one_error_line(err)
    assert "corner heavy" in line and "no DC operating point" in line


def test_no_traceback_from_the_installed_command(job, tmp_path):
    """The console script itself, as a user runs it: one line on stderr, exit 2."""
    edit(job, 'kind = "resistive"', 'kind = "resistiv"')
    proc = subprocess.run([sys.executable, "-m", "amploop.cli", *measure_args(job, tmp_path)],
                          capture_output=True, text=True, timeout=120, check=False)
    assert proc.returncode == 2
    line = one_error_line(proc.stderr)
    assert "[feedback].kind" in line and "did you mean 'resistive'" in line


def test_operating_point_found_only_by_the_transient_fallback_is_reported(job, tmp_path, capsys):
    """V = exp(100·v) has no DC solution that Newton, gmin or source stepping reach; ngspice's
    transient fallback settles somewhere. The corners still measure, with a warning in
    results.json and on the terminal (such a point moves with the capacitors)."""
    edit(job.parent / "macro.cir", ".ends", "Bx nx 0 V=exp(100*v(nx))\nRx nx 0 1k\n.ends")
    code, _, err = run(measure_args(job, tmp_path) + ["--no-report"], capsys)
    assert code == 0
    assert "transient fallback" in err
    results = json.loads((tmp_path / "out" / "results.json").read_text())
    assert all(any("transient fallback" in w for w in c["warnings"]) for c in results["corners"])


def test_a_corner_grid_too_large_to_expand_is_refused(job, tmp_path, capsys):
    values = ", ".join(str(1 + i / 1000) for i in range(600))  # 200 × 600 = 120 000 corners
    text = job.read_text() + f'[corner_grid]\ntemp = [{", ".join(str(t) for t in range(-40, 160))}]\n' \
        f"params = {{ vdd = [{values}] }}\n"
    job.write_text(text)
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "[corner_grid]" in line and "makes 120000 corners" in line


def test_a_missing_model_is_traced_to_the_users_line(job, tmp_path, capsys):
    """ngspice says "can't find model 'x'"; amploop finds the line in the user's file."""
    edit(job.parent / "macro.cir", "R2 out 0", "R2 out 0 rmod_typo r=")
    edit(job.parent / "macro.cir", "rmod_typo r=", "1k rmod_typo")
    _code, _, err = run(measure_args(job, tmp_path) + ["--no-report"], capsys)
    line = one_error_line(err)
    assert "macro.cir:7:" in line and "rmod_typo" in line


def test_parse_error_on_an_element_of_the_subckt_names_its_line(job, tmp_path, capsys):
    """ngspice reports a subckt's element by its flattened name (``m.x1.m9 …``): the
    message still points at the user's line of ``M9``."""
    edit(job.parent / "macro.cir", ".ends",
         ".model nch nmos level=1\nM9 (out n1 0 0 nch w=1u l=1u\n.ends")
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert "macro.cir:12:" in line and "m.x1.m9" in line and "modelname" in line


@pytest.mark.parametrize("old, new, place", [
    ('min = "0.1p"', 'min = "0"', "[compensation].cc.min"),  # the map's log grid divided by it
    ('min = "0.1p"', 'min = 0', "[compensation].cc.min"),
])
def test_a_cc_bound_of_zero_is_refused_when_the_job_is_read(job, tmp_path, capsys, old, new,
                                                             place):
    edit(job, old, new)
    code, _, err = run(["tune", str(job), "--out", str(tmp_path / "out"), "--workers", "1",
                        "--no-report"], capsys)
    assert code == 2
    line = one_error_line(err)
    assert place in line and "above zero" in line and "internal error" not in line
    assert not (tmp_path / "out").exists()


def test_a_device_size_bound_of_zero_is_refused_when_the_job_is_read(tmp_path, capsys):
    from conftest import DEMO

    text = (DEMO / "job_triode.toml").read_text()
    assert 'min = "0.2u"' in text
    job = tmp_path / "job.toml"
    job.write_text(text.replace('min = "0.2u"', 'min = "0"')
                   .replace('netlist = "', f'netlist = "{DEMO}/')
                   .replace('models = "', f'models = "{DEMO}/'))
    code, _, err = run(["tune", str(job), "--out", str(tmp_path / "out"), "--no-report"], capsys)
    assert code == 2
    line = one_error_line(err)
    assert "[compensation].rc.min" in line and "W must stay above zero" in line


@pytest.mark.parametrize("value", ["3e6", "1e300", "0"])
def test_a_time_limit_beyond_what_the_pool_can_wait_is_refused(job, tmp_path, capsys, value):
    """poll() takes its time-out as a C int of milliseconds: about 2.1e6 s at most."""
    edit(job, "[analysis]", f"[analysis]\ntime_limit = {value}")
    code, _, err = run(measure_args(job, tmp_path) + ["--no-report"], capsys)
    assert code == 2
    line = one_error_line(err)
    assert "[analysis].time_limit" in line and "at most 1e+06 seconds" in line


def test_a_time_limit_of_a_week_is_accepted(job, tmp_path, capsys):
    edit(job, "[analysis]", "[analysis]\ntime_limit = 604800")
    code, _, err = run(measure_args(job, tmp_path) + ["--no-report"], capsys)
    assert code == 0, err


@pytest.mark.parametrize("command", ["measure", "report"])
def test_an_out_folder_name_longer_than_the_file_system_allows_is_one_line(job, tmp_path, capsys,
                                                                           command):
    """Linux file systems allow 255 bytes per name (NAME_MAX)."""
    out = tmp_path / ("x" * 300)
    argv = ["measure", str(job), "--out", str(out)] if command == "measure" \
        else ["report", str(out)]
    code, _, err = run(argv, capsys)
    assert code == 4
    line = one_error_line(err)
    assert "File name too long" in line and "internal error" not in line
def test_a_name_used_as_a_model_blames_the_element_not_the_parameter(job, tmp_path, capsys):
    """``Cc nz out cc``: ngspice reads ``cc`` as a model name and finds no such model. The
    subckt header defines a parameter ``cc`` on line 2; the line to fix is the element's."""
    edit(job.parent / "macro.cir", "Cc nz out {cc}", "Cc nz out cc")
    code, _, err = run(measure_args(job, tmp_path) + ["--no-report"], capsys)
    assert code == 2
    line = one_error_line(err)
    assert "macro.cir:10:" in line and "can't find model 'cc'" in line, line


def test_a_model_level_ngspice_lacks_comes_with_its_note_on_the_levels_it_has(job, tmp_path,
                                                                           capsys):
    """A MOS card of a level this ngspice was not built with (33): ngspice's own note on
    the levels it supports, at the card's line in the models file, naming the element
    that needed it; not the element's expanded line with all its parameters."""
    (job.parent / "cards.lib").write_text(
        "* invented cards\n.model nfet_a nmos level=1 vto=0.4 kp=200u\n"
        ".model nfet nmos level=33 vto=0.4\n")
    edit(job, 'out = "out"\n', 'out = "out"\nmodels = "cards.lib"\n')
    geometry = " ".join(["w=1u l=0.2u ad=0.5p as=0.5p pd=3u ps=3u nrd=0.1 nrs=0.1"] * 4)
    edit(job.parent / "macro.cir", ".ends", f"M9 out n1 0 0 nfet {geometry}\n.ends")
    code, _, err = run(measure_args(job, tmp_path) + ["--no-report"], capsys)
    assert code == 2
    line = one_error_line(err)
    assert "cards.lib:3:" in line and "level=33" in line, line
    assert re.search(r"Only MOS device levels [\d,\-]+ are supported", line), line
    assert "M9 at" in line and "macro.cir:11" in line, line
    assert len(line.replace(f"{job.parent}/", "")) < 250 and "nrd" not in line, line


@pytest.mark.parametrize("old, new, place, words", [
    # SPICE reads M as milli (common practice: a megaohm is "Meg"): 1M is 1 mΩ
    ('feedback = "10000.0"', 'feedback = "1M"', "[feedback].feedback",
     ["'1M' is 1 mΩ in SPICE", "did you mean '1Meg'?"]),
    ('input = "10000.0"', 'input = "4.7mohm"', "[feedback].input",
     ["'4.7mohm' is 4.7 mΩ", "did you mean '4.7Megohm'?"]),
    ('feedback = "10000.0"', 'feedback = 0.25', "[feedback].feedback",
     ["is 250 mΩ", "below 1 Ω", "1M and 1m are 1 milliohm"]),
    ('feedback = "10000.0"', 'feedback = "{rf}"', "[feedback].feedback",
     ["is 2 mΩ at corner 'heavy'", "below 1 Ω"]),
    ('max = "50k"', 'max = "50M"', "[compensation].rc.max",
     ["'50M' is 50 mΩ in SPICE", "did you mean '50Meg'?"]),
])
def test_a_resistor_that_spice_reads_as_milliohms_is_refused(job, tmp_path, capsys, old,
                                                             new, place, words):
    """In the resistive loop of the macromodel a 1 mΩ feedback resistor measured as "never
    crosses 0 dB ... check the feedback network"; now the job is refused before any
    simulation, saying what SPICE reads."""
    edit(job, old, new)
    edit(job, "params = { cl = 1e-12 }", 'params = { cl = 1e-12, rf = "10k" }')
    edit(job, "params = { cl = 5e-12 }", 'params = { cl = 5e-12, rf = "2M" }')
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert f"job.toml:{place}:" in line and all(w in line for w in words), line
    assert not (tmp_path / "out" / "journal.sqlite").exists()


def test_set_rc_with_the_milli_suffix_is_refused_and_a_short_is_not(job, tmp_path, capsys):
    code, _, err = run(measure_args(job, tmp_path) + ["--set", "rc=1M"], capsys)
    assert code == 2
    assert "did you mean '1Meg'?" in one_error_line(err)
    edit(job, 'feedback = "10000.0"', 'feedback = "0"')  # a unity-gain follower: allowed
    edit(job, 'input = "10000.0"', 'input = "1G"')
    code, _, err = run(measure_args(job, tmp_path) + ["--set", "rc=0", "--no-report"], capsys)
    assert code == 0, err


@pytest.mark.parametrize("role", ["input_device", "second_stage_device"])
def test_a_named_device_that_is_not_in_the_subckt(tmp_path, capsys, role):
    """A typo in the device whose gm and VDS the tool reads is refused before any
    simulation, with the subckt's MOSFETs listed (it used to be accepted, and the device's
    quantities simply went missing)."""
    import shutil

    from conftest import DEMO

    shutil.copytree(DEMO, tmp_path / "demo")
    job = tmp_path / "demo" / "job.toml"
    old = {"input_device": 'input_device = "M1"', "second_stage_device": 'second_stage_device = "M6"'}
    edit(job, old[role], old[role].replace('"M', '"M9'))
    code, _, err = run(measure_args(job, tmp_path), capsys)
    assert code == 2
    line = one_error_line(err)
    assert f"[amplifier].{role}" in line and "is not a MOSFET of subckt" in line, line
    assert "M1" in line and "M6" in line, line


@pytest.fixture
def internal_failure(monkeypatch):
    """An unexpected exception inside the report command (a bug, as far as the command
    line can tell)."""
    import amploop.corners.outputs

    def broken(path):
        raise RuntimeError("a bug for the test")

    monkeypatch.setattr(amploop.corners.outputs, "is_folder", broken)
    monkeypatch.delenv("AMPLOOP_DEBUG", raising=False)


def test_an_internal_error_has_its_own_exit_code_and_one_line(internal_failure, tmp_path, capsys):
    from amploop.cli import ExitCode

    code, _, err = run(["report", str(tmp_path)], capsys)
    assert code == ExitCode.INTERNAL == 70  # EX_SOFTWARE of BSD's sysexits.h
    line = one_error_line(err)
    assert "internal error: RuntimeError: a bug for the test" in line
    assert "--debug shows the traceback" in line and "AMPLOOP_DEBUG" not in line


@pytest.mark.parametrize("argv", [["--debug", "report", "OUT"], ["report", "OUT", "--debug"],
                                  ["report", "OUT"]])
def test_debug_shows_the_traceback_of_an_internal_error(internal_failure, tmp_path, capsys,
                                                        monkeypatch, argv):
    """``--debug`` before or after the command; without it, the environment variable."""
    if "--debug" not in argv:
        monkeypatch.setenv("AMPLOOP_DEBUG", "1")
    code, _, err = run([str(tmp_path) if a == "OUT" else a for a in argv], capsys)
    assert code == 70
    assert "Traceback (most recent call last)" in err
    assert "RuntimeError: a bug for the test" in err and "in broken" in err
    assert err.strip().splitlines()[-1].startswith("amploop: internal error: RuntimeError")
