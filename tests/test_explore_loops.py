"""explore.html of a fully-differential amplifier (both loops) and of a job of several
feedback configurations (the table grouped by configuration), in headless Chromium.

References: the verify step's simulation (results.json, both loops); ``loop_margins`` on
``CompensationMap.loop_gain`` of the common-mode maps (amploop's prediction in Python);
the exact loop gains of tests/nodal_fd.py (own nodal analysis of an invented circuit,
Bode's return ratios) for the common-mode loop at other values.
"""

from __future__ import annotations

import statistics

import numpy as np
import pytest
from nodal_fd import common_mode_loop_gain
from test_configurations import job_dict
from test_explore import open_page, table, type_values
from test_report_fd import CM_TARGET_PM, CORNERS, TARGET_PM, _job

from amploop.analysis.loopgain import FrequencyResponse
from amploop.analysis.margins import loop_margins
from amploop.cli import main
from amploop.report.data import load_report_data
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

KEYS = ("dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db")
CM_KEYS = tuple(f"common_mode.{k}" for k in KEYS)


def _tuned(folder, data: dict):
    """Tune ``data`` into folder/out and write its page with ``amploop explore``; the
    results, the maps and the common-mode maps as the report reads them."""
    # with the report's samples: a single-ended job is characterised at its ports, and the
    # page's maps are the report's three samples per corner
    result = tune(load_job(data, base=folder), out=folder / "out", workers=2)
    assert result.status == "converged", result.outcome.message
    assert main(["explore", str(folder / "out")]) == 0
    with load_report_data(folder / "out") as report:
        maps = {name: report.maps[name] for name in report.maps}
        cm_maps = {name: report.cm_maps[name] for name in report.cm_maps}
        return folder / "out", report.results, maps, cm_maps


@pytest.fixture(scope="module")
def fd(tmp_path_factory):
    """The invented fully-differential model where the common-mode loop limits, tuned with
    the map strategy over two loads (as tests/test_report_fd.py)."""
    folder = tmp_path_factory.mktemp("explore_fd")
    return _tuned(folder, _job(folder))


def predicted(cmap, cc: float, rc: float) -> dict:
    return loop_margins(cmap.loop_gain(cc, rc)).as_dict()


def test_a_fully_differential_page_has_both_loops_at_the_verified_figures(browser, fd):
    out, results, maps, cm_maps = fd
    assert set(cm_maps) == set(maps) == {c["name"] for c in results["corners"]}
    open_page(browser, out / "explore.html")
    shown = table(browser)
    for corner in results["corners"]:  # reference: the verify step's simulation
        figures, cm = shown[corner["name"]], corner["common_mode"]
        assert set(figures) == set(KEYS) | set(CM_KEYS)
        assert figures["phase_margin_deg"] == pytest.approx(corner["phase_margin_deg"], abs=0.01)
        assert figures["common_mode.phase_margin_deg"] == pytest.approx(cm["phase_margin_deg"],
                                                                        abs=0.01)
        assert figures["common_mode.unity_gain_hz"] == pytest.approx(cm["unity_gain_hz"],
                                                                     rel=1e-3)
        assert figures["common_mode.gain_margin_db"] == pytest.approx(cm["gain_margin_db"],
                                                                      abs=0.01)
        assert figures["common_mode.dc_loop_gain_db"] == pytest.approx(cm["dc_loop_gain_db"],
                                                                       abs=0.01)
    # the two loops are different loops: the checks above could not pass with one for both
    assert all(abs(f["phase_margin_deg"] - f["common_mode.phase_margin_deg"]) > 3
               for f in shown.values())
    cm_worst = browser.execute_script(
        "return document.querySelector('#margins tr[data-cm-worst=\"true\"]').dataset.corner")
    assert cm_worst == results["worst"]["common_mode"]["phase_margin_corner"]
    state = browser.find_element("id", "state").text
    assert "the common-mode loop limits" in state and "met at every corner in both loops" in state


def test_typed_values_give_amploops_common_mode_prediction(browser, fd):
    out, _, maps, cm_maps = fd
    open_page(browser, out / "explore.html")
    worst = 0.0
    for cc_text, cc in (("0.3p", 0.3e-12), ("700f", 700e-15), ("1.6p", 1.6e-12), ("4.2p", 4.2e-12)):
        for rc_text, rc in (("0", 0.0), ("1.2k", 1.2e3), ("3.3k", 3.3e3), ("5k", 5e3)):
            type_values(browser, cc_text, rc_text)
            shown = table(browser)
            for name in maps:  # reference: amploop's prediction in Python, both loops
                for prefix, cmap in (("", maps[name]), ("common_mode.", cm_maps[name])):
                    expected = predicted(cmap, cc, rc)
                    for key in KEYS:
                        value = shown[name][prefix + key]
                        if expected[key] is None:
                            assert value is None, (name, prefix + key, cc, rc)
                        elif key == "unity_gain_hz":
                            assert value == pytest.approx(expected[key], rel=1e-6)
                        else:
                            if prefix:
                                worst = max(worst, abs(value - expected[key]))
                            assert value == pytest.approx(expected[key], abs=0.01), \
                                (name, prefix + key, cc, rc)
    print(f"largest common-mode deviation from Python on the grid: {worst:.2e} (° or dB)")


def test_the_common_mode_figures_are_those_of_the_exact_model(browser, fd):
    out, _, maps, _ = fd
    open_page(browser, out / "explore.html")
    f = next(iter(maps.values())).frequency_hz
    for cc_text, cc, rc_text, rc in (("0.5p", 0.5e-12, "0", 0.0), ("2p", 2e-12, "2k", 2e3)):
        type_values(browser, cc_text, rc_text)
        shown = table(browser)
        for name, model in CORNERS.items():  # reference: own nodal analysis at (Cc, Rc)
            exact = loop_margins(FrequencyResponse(
                f, common_mode_loop_gain(model.with_(cc=cc, rc=rc), f))).as_dict()
            assert shown[name]["common_mode.phase_margin_deg"] == pytest.approx(
                exact["phase_margin_deg"], abs=0.05)
            assert shown[name]["common_mode.unity_gain_hz"] == pytest.approx(
                exact["unity_gain_hz"], rel=1e-3)


def _cm_miss(maps, cm_maps) -> tuple[float, float]:
    """A point where every corner's differential loop meets its target and some corner's
    common-mode loop misses its own (found on the Python maps)."""
    for cc in np.geomspace(0.3e-12, 4e-12, 25):
        for rc in (0.0, 1e3, 2e3, 5e3):
            diff = min(predicted(m, cc, rc)["phase_margin_deg"] for m in maps.values())
            cm = min(predicted(m, cc, rc)["phase_margin_deg"] for m in cm_maps.values())
            if diff > TARGET_PM + 1 and cm < CM_TARGET_PM - 1:
                return float(cc), rc
    raise AssertionError("no point where only the common-mode loop misses")


def test_the_target_holds_both_loops(browser, fd):
    out, _, maps, cm_maps = fd
    cc, rc = _cm_miss(maps, cm_maps)
    open_page(browser, out / "explore.html", f"#cc={cc!r}&rc={rc!r}")
    cells = browser.execute_script("""
        return [...document.querySelectorAll('#margins tr[data-corner]')].map(tr =>
          [tr.dataset.corner, tr.cells[9].dataset.met, tr.cells[9].textContent]);""")
    for name, met, words in cells:
        cm_pm = predicted(cm_maps[name], cc, rc)["phase_margin_deg"]
        assert met == ("true" if cm_pm >= CM_TARGET_PM else "false"), (name, cm_pm)
        if met == "false":
            assert words == "missed (common-mode)"
    assert any(met == "false" for _, met, _ in cells)
    assert "missed" in browser.find_element("id", "state").text


def test_the_feasible_region_is_where_both_loops_meet_their_targets(browser, fd):
    out, _, maps, cm_maps = fd
    open_page(browser, out / "explore.html")
    cells = browser.execute_script("""
        const v = AMP.ui.mapView, out = [];
        for (let i = 0; i < v.NX; i += 3) for (let j = 0; j < v.NY; j += 3)
          out.push([v.ccAt(i), v.secAt(j), v.feasibleAt(i, j) ? 1 : 0]);
        return out;""")
    only_cm = 0
    for cc, rc, feasible in cells:  # reference: the Python maps, away from the edges (0.5°)
        slack = min([predicted(m, cc, rc)["phase_margin_deg"] - TARGET_PM for m in maps.values()]
                    + [predicted(m, cc, rc)["phase_margin_deg"] - CM_TARGET_PM
                       for m in cm_maps.values()])
        if abs(slack) > 0.5:
            assert feasible == (slack > 0), (cc, rc, slack)
        diff_ok = all(predicted(m, cc, rc)["phase_margin_deg"] > TARGET_PM + 0.5
                      for m in maps.values())
        only_cm += diff_ok and slack < -0.5
    assert only_cm > 0  # points that the differential loop alone would have called feasible


def test_both_loops_are_drawn_and_a_slider_redraws_quickly(browser, fd, tmp_path):
    out, _, _, _ = fd
    open_page(browser, out / "explore.html")
    cm_colour = browser.execute_script("return AMP.DATA.style.common_mode")
    rgb = [int(cm_colour[k:k + 2], 16) for k in (1, 3, 5)]
    inked = browser.execute_script("""
        const c = document.getElementById('phase'), px = c.getContext('2d')
          .getImageData(0, 0, c.width, c.height).data, rgb = arguments[0];
        let n = 0;
        for (let k = 0; k < px.length; k += 4)
          if (px[k + 3] > 200 && Math.abs(px[k] - rgb[0]) + Math.abs(px[k + 1] - rgb[1])
              + Math.abs(px[k + 2] - rgb[2]) < 40) n++;
        return n;""", rgb)
    assert inked > 200  # the picked corner's common-mode curve, in the report's colour
    times = browser.execute_script("""
        const times = [];
        for (const [id, values] of [['cc-slider', [100, 300, 500, 700, 900, 450]],
                                    ['rc-slider', [0, 200, 400, 600, 800, 1000]]]) {
          const s = document.getElementById(id);
          for (const v of values) {
            s.value = v;
            const t0 = performance.now();
            s.dispatchEvent(new Event('input'));
            times.push(performance.now() - t0);
          }
        }
        return times;""")
    print(f"redraw of 2 corners × 2 loops: median {statistics.median(times):.1f} ms, "
          f"max {max(times):.1f} ms")
    assert statistics.median(times) < 50.0
    assert browser.save_screenshot(str(tmp_path / "explore_fd.png"))


def test_points_of_several_configurations_are_grouped_by_configuration(browser, tmp_path):
    out, results, _, cm_maps = _tuned(tmp_path, job_dict(tmp_path))
    assert not cm_maps
    open_page(browser, out / "explore.html")
    rows = browser.execute_script("""
        return [...document.querySelectorAll('#margins tbody tr')].map(tr =>
          tr.dataset.corner ? ['point', tr.dataset.corner, tr.dataset.configuration]
                            : ['group', tr.dataset.configuration, tr.textContent]);""")
    assert [r[:2] for r in rows] == [
        ["group", "amplify"], ["point", "light@amplify"], ["point", "heavy@amplify"],
        ["group", "sample"], ["point", "light@sample"], ["point", "heavy@sample"]]
    assert rows[0][2] == "configuration amplify (2 points)"
    by_name = {c["name"]: c for c in results["corners"]}
    for kind, name, configuration in rows:
        if kind == "point":  # reference: results.json's configuration of each point
            assert configuration == by_name[name]["configuration"]
    shown = table(browser)
    for name, corner in by_name.items():  # reference: the verify step's simulation
        assert shown[name]["phase_margin_deg"] == pytest.approx(corner["phase_margin_deg"],
                                                                abs=0.01)
        assert set(shown[name]) == set(KEYS)
    assert "in 2 configurations (amplify, sample)" in browser.find_element("id", "summary").text
