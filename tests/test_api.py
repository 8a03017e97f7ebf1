"""The Python side: a job from a dict, tune without an out folder, results as a DataFrame
and as python-control FRDs, results.json flat enough for pandas, and the command line's
options and JSON line.

The references: the demo job read from its file (the dict must give the same Job), the
same tune with an out folder (the values must not depend on it), python-control's
``stability_margins`` on the FRD (the margins must agree with amploop's within the
0.05° / 0.05 dB of tests/test_margins.py), and ``pandas.json_normalize`` (no column twice).
"""

from __future__ import annotations

import dataclasses
import json
import sys
import tomllib
from pathlib import Path

import control
import numpy as np
import pandas
import pytest
from conftest import DEMO

from amploop.cli import main
from amploop.corners.measure import measure
from amploop.errors import JobError
from amploop.report.data import load_report_data
from amploop.spec.job import load_job
from amploop.strategy.devicemap import device_json
from amploop.strategy.tune import tune


def demo_data() -> dict:
    return tomllib.loads((DEMO / "job.toml").read_text(encoding="utf-8"))


# --- a job from a dict -------------------------------------------------------------------


def test_a_dict_gives_the_same_job_as_its_file():
    from_file = load_job(DEMO / "job.toml")
    from_dict = load_job(demo_data(), base=DEMO)
    for f in dataclasses.fields(from_file):
        if f.name != "path":
            assert getattr(from_dict, f.name) == getattr(from_file, f.name), f.name
    assert from_dict.path == DEMO.resolve() / "<dict>"
    assert from_dict.folder == from_file.folder
    assert from_dict.amplifier.netlist == (DEMO / "two_stage.cir").resolve()


def test_a_dict_is_not_changed_and_its_name_defaults_to_job():
    data = demo_data()
    del data["name"]
    before = json.dumps(data, sort_keys=True)
    job = load_job(data, base=str(DEMO))
    assert job.name == "job"
    assert json.dumps(data, sort_keys=True) == before


def test_a_wrong_key_in_a_dict_gives_the_files_message(tmp_path):
    text = (DEMO / "job.toml").read_text(encoding="utf-8")
    text = text.replace('subckt = "two_stage"', 'subckt = "two_stage"\nsubkt = "x"')
    (tmp_path / "job.toml").write_text(text)
    with pytest.raises(JobError) as from_file:
        load_job(tmp_path / "job.toml")
    data = demo_data()
    data["amplifier"]["subkt"] = "x"
    with pytest.raises(JobError) as from_dict:
        load_job(data, base=DEMO)
    assert from_dict.value.place == from_file.value.place == "[amplifier].subkt"
    assert from_dict.value.file == str(DEMO.resolve() / "<dict>")
    assert str(from_dict.value).replace(from_dict.value.file, "JOB") == \
        str(from_file.value).replace(from_file.value.file, "JOB")
    assert "did you mean 'subckt'" in str(from_dict.value)
    assert "\n" not in str(from_dict.value)


def test_a_dicts_files_resolve_against_its_base(tmp_path):
    with pytest.raises(JobError) as error:
        load_job(demo_data(), base=tmp_path)  # no two_stage.cir there
    assert error.value.place == "[amplifier].netlist"
    assert "<dict>" in str(error.value) and "file not found" in str(error.value)


# --- tune without an out folder; frames ----------------------------------------------------


@pytest.fixture(scope="module")
def tuned(tmp_path_factory):
    """The demo tuned twice: into an out folder, and without one."""
    folder = tmp_path_factory.mktemp("api")
    job = load_job(DEMO / "job.toml")
    return (folder, tune(job, out=folder / "out", workers=2), tune(job, workers=2))


def test_tune_without_out_gives_the_same_values(tuned):
    folder, with_out, without = tuned
    assert with_out.status == without.status == "converged"
    assert without.out is None and with_out.out == (folder / "out").resolve()
    assert without.outcome.values == with_out.outcome.values
    assert [h.values for h in without.history] == [h.values for h in with_out.history]
    for a, b in zip(without.corners, with_out.corners, strict=True):
        assert a.corner == b.corner and a.margins == b.margins
    assert without.step_checks.keys() == with_out.step_checks.keys()
    assert without.compensated["path"] is None and without.compensated["files"] == []

    def changes(diff: str) -> list[str]:
        return [line for line in diff.splitlines() if line[:1] in "+-"
                and not line.startswith(("+++", "---"))]

    assert changes(without.compensated["diff"]) == changes(with_out.compensated["diff"])
    assert changes(without.compensated["diff"])


def test_tune_without_out_cannot_resume():
    with pytest.raises(JobError, match="nothing to resume without an out folder"):
        tune(load_job(DEMO / "job.toml"), resume=True)


@pytest.mark.parametrize("which", ["measure", "tune"])
def test_the_dataframe_holds_each_corners_figures(which, measured, tuned):
    result = measured[1] if which == "measure" else tuned[1]
    frame = result.to_dataframe()
    assert list(frame.columns) == ["name", "temperature_c", "dc_loop_gain_db", "unity_gain_hz",
                                   "phase_margin_deg", "gain_margin_db", "status"]
    assert len(frame) == len(result.corners)
    for (_, row), c in zip(frame.iterrows(), result.corners, strict=True):
        assert row["name"] == c.corner.name and row["status"] == c.status
        assert row["temperature_c"] == c.corner.temp
        for key in ("dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db"):
            assert row[key] == getattr(c.margins, key), key


def test_the_frds_margins_agree_with_amploops(tuned):
    """Reference: python-control's stability_margins on the FRD, within the tolerance of
    tests/test_margins.py (0.05° and 0.05 dB; the crossing frequency to 0.1 %)."""
    _, result, _ = tuned
    frds = result.to_frd()
    assert list(frds) == [c.corner.name for c in result.corners]
    for c in result.corners:
        frd = frds[c.corner.name]
        assert isinstance(frd, control.FRD)
        assert np.allclose(frd.omega, 2 * np.pi * c.loop_gain.frequency_hz)
        gm, pm, _, _w_180, w_c, _ = control.stability_margins(frd)
        assert c.margins.phase_margin_deg == pytest.approx(pm, abs=0.05), c.corner.name
        assert c.margins.unity_gain_hz == pytest.approx(w_c / (2 * np.pi), rel=1e-3)
        assert c.margins.gain_margin_db == pytest.approx(20 * np.log10(gm), abs=0.05)
    assert result.corners[0].to_frd().omega == pytest.approx(frds[result.corners[0].corner.name].omega)


def test_without_pandas_the_dataframe_is_a_one_line_import_error(tuned, monkeypatch):
    _, result, _ = tuned
    monkeypatch.setitem(sys.modules, "pandas", None)
    with pytest.raises(ImportError) as error:
        result.to_dataframe()
    assert "needs the pandas package: pip install pandas" in str(error.value)
    assert "\n" not in str(error.value)


# --- results.json for pandas ---------------------------------------------------------------


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    folder = tmp_path_factory.mktemp("measured") / "out"
    return folder, measure(load_job(DEMO / "job.toml"), out=folder, workers=2)


def flat_columns(results: dict) -> list[str]:
    return list(pandas.json_normalize(results["corners"]).columns)


@pytest.mark.parametrize("which", ["measure", "tune"])
def test_results_json_normalizes_without_repeated_facts(which, measured, tuned):
    folder = measured[0] if which == "measure" else tuned[0] / "out"
    results = json.loads((folder / "results.json").read_text())
    assert results["schema"] == 2
    columns = flat_columns(results)
    assert len(columns) == len(set(columns))
    leaves = [c.rsplit(".", 1)[-1] for c in columns if not c.startswith("params.")]
    for fact in ("overshoot_pct", "settling_time_s", "phase_margin_deg", "unity_gain_hz"):
        assert leaves.count(fact) == 1, (fact, columns)
    frame = pandas.json_normalize(results["corners"])
    assert frame["name"].tolist() == [c["name"] for c in results["corners"]]
    assert frame["overshoot_pct"].notna().all()


def test_the_device_corners_are_a_list_of_named_records():
    report = {"name": "Mz", "size": "w", "value": 2e-7, "model": "nch",
              "corners": {"a": {"resistance_ohm": 1e4, "vt": 0.4},
                          "b": {"resistance_ohm": 2e4, "vt": 0.5}},
              "sample_resistance_ohm": {"a": 1.1e4, "b": 2.2e4}, "start": {"from": "x"}}
    data = device_json(report)
    assert data["corners"] == [
        {"name": "a", "resistance_ohm": 1e4, "vt": 0.4, "sample_resistance_ohm": 1.1e4},
        {"name": "b", "resistance_ohm": 2e4, "vt": 0.5, "sample_resistance_ohm": 2.2e4}]
    assert "sample_resistance_ohm" not in data and data["start"] == {"from": "x"}
    columns = list(pandas.json_normalize({"device": data}, ["device", "corners"]).columns)
    assert len(columns) == len(set(columns))
    assert device_json(None) is None


def test_a_results_json_of_the_old_schema_is_refused_in_one_line(tmp_path, capsys):
    (tmp_path / "results.json").write_text(json.dumps({"schema": 1, "corners": []}))
    with pytest.raises(JobError, match="results.json has schema 1; this amploop reads "
                       "schema 2"):
        load_report_data(tmp_path)
    assert main(["report", str(tmp_path)]) == 2
    err = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert len(err) == 1 and "schema 1" in err[0], err


# --- the command line ----------------------------------------------------------------------


def test_only_measure_offers_set(capsys, tmp_path):
    with pytest.raises(SystemExit) as done:
        main(["tune", "--help"])
    assert done.value.code == 0
    assert "--set" not in capsys.readouterr().out
    with pytest.raises(SystemExit):
        main(["measure", "--help"])
    assert "--set" in capsys.readouterr().out
    with pytest.raises(SystemExit) as done:
        main(["tune", str(DEMO / "job.toml"), "--out", str(tmp_path), "--set", "cc=1p"])
    assert done.value.code == 2
    assert "unrecognized arguments: --set" in capsys.readouterr().err


def test_measure_json_carries_the_margins_and_the_limiting_corner(measured, capsys):
    folder, result = measured
    code = main(["measure", str(DEMO / "job.toml"), "--out", str(folder), "--json",
                 "--no-report", "--workers", "2"])
    assert code == 0
    lines = capsys.readouterr().out.splitlines()
    assert len(lines) == 1
    summary = json.loads(lines[0])
    assert [c["name"] for c in summary["corners"]] == [c.corner.name for c in result.corners]
    for entry, c in zip(summary["corners"], result.corners, strict=True):
        assert entry["status"] == c.status
        assert entry["phase_margin_deg"] == pytest.approx(c.margins.phase_margin_deg)
        assert entry["gain_margin_db"] == pytest.approx(c.margins.gain_margin_db)
        assert entry["unity_gain_hz"] == pytest.approx(c.margins.unity_gain_hz)
    lowest = min(result.corners, key=lambda c: c.margins.phase_margin_deg)
    assert summary["worst"]["phase_margin_corner"] == lowest.corner.name
    assert summary["worst"]["phase_margin_deg"] == pytest.approx(lowest.margins.phase_margin_deg)
    assert summary["failed_corners"] == [] and summary["out"] == str(Path(folder).resolve())
