"""Tuning outcomes on the demo amplifier: Cc tuned alone, targets kept through rounding,
a missed target named with its corner, and no compensated netlist unless the run converged.

The reference is the simulator itself, independently: a fresh ``measure`` of the
compensated netlist (a new out folder, nothing reused) must give the margins tune
reported, and the margins a tune reports must meet the job's targets at every corner.
"""

from __future__ import annotations

import json
import shutil
from dataclasses import replace
from pathlib import Path

import pytest
from conftest import DEMO

from amploop.cli import main
from amploop.cli.terminal import corner_table, values_line
from amploop.corners.measure import measure
from amploop.spec.job import load_job
from amploop.spec.limits import Target
from amploop.spec.model import Knob
from amploop.strategy.remarks import bound_remark
from amploop.strategy.tune import tune
from amploop.strategy.worst import corner_shortfall, missed_target


def demo_copy(folder: Path, edit=lambda text: text) -> Path:
    """The demo's files copied into ``folder``, its job text passed through ``edit``."""
    folder.mkdir(parents=True, exist_ok=True)
    for name in ("two_stage.cir", "models.lib"):
        shutil.copy(DEMO / name, folder / name)
    text = edit((DEMO / "job.toml").read_text())
    (folder / "job.toml").write_text(text)
    return folder / "job.toml"


def without_rc(text: str) -> str:
    assert '\nrc = { param = "rc"' in text
    return "\n".join(line for line in text.splitlines() if not line.startswith("rc = "))


@pytest.mark.parametrize("strategy", ["map", "textbook", "optimizer"])
def test_cc_alone_tunes_with_every_strategy(tmp_path, strategy):
    """Without an rc entry only Cc is tuned; the netlist's Rc (500 Ω) stays as it is, and
    a fresh measurement of the compensated netlist gives the reported margins."""
    job = load_job(demo_copy(tmp_path / "job", without_rc))
    result = tune(job, out=tmp_path / "out", strategy=strategy, workers=2, time_domain=False)
    assert result.status == "converged", result.outcome.message
    assert set(result.outcome.values) == {"cc"}
    worst = result.outcome.final.worst
    assert job.target.phase_margin_deg <= worst.phase_margin_deg
    assert worst.gain_margin_db >= job.target.gain_margin_db
    compensated = Path(result.compensated["path"])
    text = compensated.read_text()
    assert "params: cc=" in text and "rc=500" in text  # Rc untouched
    fresh = measure(load_job(demo_copy(tmp_path / "check", without_rc)), out=tmp_path / "check" / "out",
                    overrides=dict(result.outcome.values), workers=2, time_domain=False)
    assert fresh.ac_reused == 0
    reported = {c.corner.name: c.margins.phase_margin_deg for c in result.corners}
    for corner in fresh.corners:
        assert corner.margins.phase_margin_deg == pytest.approx(reported[corner.corner.name],
                                                                abs=0.05)


def test_rounding_keeps_a_gain_margin_target_that_binds(tmp_path):
    """At 60° and a 27.5 dB gain-margin minimum the optimum sits on the gain-margin bound
    (the demo's fast, light-load corner); rounding to 4 digits must not push it below.
    Every verified corner meets both targets, and the run converges."""
    def edit(text):
        return text.replace("phase_margin = 65", "phase_margin = 60").replace(
            "gain_margin = 10", "gain_margin = 27.5")

    job = load_job(demo_copy(tmp_path / "job", edit))
    result = tune(job, out=tmp_path / "out", workers=2, time_domain=False)
    assert result.status == "converged", result.outcome.message
    gms = [c.margins.gain_margin_db for c in result.corners]
    assert min(gms) >= 27.5
    assert min(gms) < 27.6  # the bound binds: this checks the case it is meant to
    assert all(c.margins.phase_margin_deg >= 60.0 for c in result.corners)
    for value in result.outcome.values.values():
        assert float(f"{value:.4g}") == value


@pytest.fixture(scope="module")
def demo_corners(tmp_path_factory):
    """The demo measured at the values it tunes to (292.8 fF, 20 kΩ)."""
    out = tmp_path_factory.mktemp("measured")
    return measure(load_job(DEMO / "job.toml"), out=out, overrides={"cc": 292.8e-15, "rc": 20e3},
                   workers=2, time_domain=False).corners


def test_a_missed_gain_margin_is_named_with_its_corner_and_marked(demo_corners):
    """Against a 30 dB minimum the fast corners fall short: the sentence names the gain
    margin and the corner with the smallest one; the table marks each short corner and
    leaves the others "ok"."""
    target = Target(phase_margin_deg=65.0, gain_margin_db=30.0)
    lowest = min(demo_corners, key=lambda c: c.margins.gain_margin_db)
    sentence = missed_target(demo_corners, target)
    assert sentence is not None and "gain margin" in sentence and "phase margin" not in sentence
    assert f"corner {lowest.corner.name}" in sentence and "30 dB" in sentence
    table = corner_table(demo_corners, target).splitlines()
    for corner in demo_corners:
        row = next(line for line in table if line.startswith(corner.corner.name + " "))
        if corner.margins.gain_margin_db < 30.0:
            assert row.rstrip().endswith("< 30 dB"), row
        else:
            assert row.rstrip().endswith("ok"), row
    assert missed_target(demo_corners, Target(phase_margin_deg=60.0, gain_margin_db=10.0)) is None


def test_the_terminal_uses_the_words_of_the_report_and_results_json(demo_corners):
    """One name for one thing: the table's headings read as the report's summary table
    ("DC loop gain (dB)", never "DC gain dB"), and the values line names the roles Cc and
    Rc as the report and the messages do, whatever the job's keys are."""
    from amploop.report.summary import _header

    table = corner_table(demo_corners).splitlines()
    rule = next(i for i, line in enumerate(table) if set(line) <= {"-", " "})
    words = " ".join(" ".join(line.split()) for line in table[:rule])
    for heading in ("DC loop gain", "(dB)", "unity-gain", "frequency", "phase margin",
                    "gain margin", "crossover"):
        assert heading in words, table[:rule]
    assert "DC gain dB" not in words and "PM deg" not in words, words
    assert [" ".join(h.split()) for h in _header(False)[1:5]] == [
        "DC loop gain (dB)", "unity-gain frequency", "phase margin (°)", "gain margin (dB)"]
    job = load_job(DEMO / "job.toml")
    assert values_line(job, {"cc": 292.8e-15, "rc": 20e3}) == "Cc = 292.8 fF, Rc = 20 kΩ"


def test_a_shortfall_shows_the_digits_that_make_it_one(demo_corners):
    """9.9956 dB against 10 dB must not read "10.00": enough digits to read below."""
    corner = demo_corners[0]
    short = replace(corner, margins=replace(corner.margins, gain_margin_db=9.9956))
    assert corner_shortfall(short, Target(phase_margin_deg=1.0, gain_margin_db=10.0)) == \
        "GM 9.996 dB < 10 dB"
    missed = missed_target((short,), Target(phase_margin_deg=1.0, gain_margin_db=10.0))
    assert "9.996 dB" in missed and corner.corner.name in missed


def test_a_tune_that_misses_its_target_writes_and_announces_no_compensated_netlist(
        tmp_path, capsys):
    """A converged run first fills the out folder; then the same folder, with Cc held to
    0.2–0.25 pF and no Rc (65° out of reach): exit 3, no "compensated netlist:" line, the
    old copy removed, and results.json holds none."""
    out = tmp_path / "out"
    assert main(["tune", str(demo_copy(tmp_path / "ok")), "--out", str(out), "--no-report",
                 "--quiet"]) == 0
    assert (out / "compensated" / "two_stage.cir").is_file()
    job = demo_copy(tmp_path / "far", lambda t: t.replace('max = "10p"', 'max = "0.25p"')
                    .replace('max = "20k"', 'max = "0"'))
    code = main(["tune", str(job), "--out", str(out), "--no-report"])
    printed = capsys.readouterr().out
    assert code == 3
    assert "compensated netlist:" not in printed
    assert "no compensated netlist written: the run is infeasible" in printed
    assert not (out / "compensated" / "two_stage.cir").exists()
    assert json.loads((out / "results.json").read_text())["compensated_netlist"] is None


def test_values_near_a_bound_are_noted():
    """19.9 kΩ against a 20 kΩ bound is within 0.5 % of it; on it, "at"; far from it, no
    note; Rc = 0 on a lower bound of 0 is no limit of the search; under the settling
    objective a wider bound may give faster settling, not more bandwidth."""
    knobs = {"cc": Knob("cc", "param", "cc", minimum=0.2e-12, maximum=10e-12),
             "rc": Knob("rc", "param", "rc", minimum=0.0, maximum=20e3)}
    near = bound_remark({"cc": 1e-12, "rc": 19.9e3}, knobs)
    assert "Rc = 19.9 kΩ is within 0.5 % of its upper bound 20 kΩ" in near
    assert "Cc" not in near
    assert "Rc is at its upper bound 20 kΩ" in bound_remark({"cc": 1e-12, "rc": 20e3}, knobs)
    assert "Cc = 203 fF is within 1.5 % of its lower bound 200 fF" in bound_remark(
        {"cc": 0.203e-12, "rc": 5e3}, knobs)
    assert bound_remark({"cc": 1e-12, "rc": 15e3}, knobs) == ""
    assert bound_remark({"cc": 1e-12, "rc": 0.0}, knobs) == ""
    assert near.endswith("a wider bound may give more bandwidth)")
    settling = bound_remark({"cc": 1e-12, "rc": 19.9e3}, knobs, objective="settling")
    assert settling.endswith("a wider bound may give faster settling)"), settling
