"""explore.html in a real browser (Debian's headless Chromium through selenium): the margins
its script predicts against the verified simulation, against amploop's own map
prediction in Python and against the exact loop gain of the nodal macromodel; its
controls, its links, its redraw time and its plots.

References: the verify step's simulation (results.json); ``loop_margins`` on
``CompensationMap.loop_gain`` (amploop's prediction in Python); ``exact_loop_gain`` of
tests/nodal.py (own nodal analysis of the macromodel, an invented circuit).
"""

from __future__ import annotations

import base64
import json
import shutil
import statistics
from pathlib import Path

import numpy as np
import pytest
from nodal import Macromodel, exact_loop_gain

from amploop.analysis.compmap import CompensationMap
from amploop.analysis.loopgain import FrequencyResponse
from amploop.analysis.margins import loop_margins
from amploop.cli import main
from amploop.report.data import load_report_data
from amploop.report.explore import explore_page

DEMO = Path(__file__).resolve().parents[1] / "netlists" / "demo"
KEYS = ("dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db")


def open_page(driver, path: Path, fragment: str = "") -> None:
    driver.get("about:blank")  # a new document even when only the fragment differs
    driver.get(path.as_uri() + fragment)
    assert driver.execute_script("return document.body.dataset.ready") == "1"


def table(driver) -> dict[str, dict[str, float | None]]:
    """The margins table read from the DOM: corner -> results.json key -> value (SI)."""
    rows = driver.execute_script("""
        return [...document.querySelectorAll('#margins tr[data-corner]')].map(tr =>
          [tr.dataset.corner, Object.fromEntries([...tr.querySelectorAll('td[data-key]')]
            .map(td => [td.dataset.key, td.dataset.value]))]);""")
    return {name: {k: (float(v) if v not in (None, "") else None) for k, v in cells.items()}
            for name, cells in rows}


def type_values(driver, cc: str, second: str) -> None:
    """Type both values with their SPICE suffixes, as a user does (a change event each)."""
    driver.execute_script("""
        for (const [id, text] of [['cc-text', arguments[0]], ['rc-text', arguments[1]]]) {
          const field = document.getElementById(id);
          field.value = text; field.dispatchEvent(new Event('change'));
        }""", cc, second)


def python_prediction(cmap: CompensationMap, cc: float, rc: float) -> dict:
    return loop_margins(cmap.loop_gain(cc, rc)).as_dict()


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo tuned with the map strategy; explore.html is written by the tune."""
    out = tmp_path_factory.mktemp("explore") / "out"
    assert main(["tune", str(DEMO / "job.toml"), "--out", str(out), "--quiet"]) == 0
    assert (out / "explore.html").is_file()
    with load_report_data(out) as data:
        maps = {name: data.maps[name] for name in data.maps}
        results = data.results
    return out, results, maps


def test_at_the_chosen_values_the_page_shows_the_verified_margins(browser, demo):
    out, results, _ = demo
    open_page(browser, out / "explore.html")
    shown = table(browser)
    assert set(shown) == {c["name"] for c in results["corners"]}
    for corner in results["corners"]:  # reference: the verify step's simulation
        figures = shown[corner["name"]]
        assert figures["phase_margin_deg"] == pytest.approx(corner["phase_margin_deg"], abs=0.01)
        assert figures["unity_gain_hz"] == pytest.approx(corner["unity_gain_hz"], rel=1e-3)
        assert figures["gain_margin_db"] == pytest.approx(corner["gain_margin_db"], abs=0.01)
    worst = browser.execute_script(
        "return document.querySelector('#margins tr[data-worst=\"true\"]').dataset.corner")
    assert worst == results["worst"]["phase_margin_corner"]
    assert "simulated" in browser.find_element("id", "state").text


def test_typed_values_give_amploops_own_prediction_on_a_grid(browser, demo):
    out, _, maps = demo
    open_page(browser, out / "explore.html")
    worst = 0.0
    for cc_text, cc in (("0.25p", 0.25e-12), ("600f", 600e-15), ("1.3p", 1.3e-12),
                        ("4.7p", 4.7e-12)):
        for rc_text, rc in (("0", 0.0), ("2.2k", 2.2e3), ("9.1kOhm", 9.1e3), ("18k", 18e3)):
            type_values(browser, cc_text, rc_text)
            shown = table(browser)
            for name, cmap in maps.items():  # reference: amploop's prediction in Python
                expected = python_prediction(cmap, cc, rc)
                for key in KEYS:
                    if expected[key] is None:
                        assert shown[name][key] is None, (name, key, cc, rc)
                        continue
                    if key == "unity_gain_hz":
                        assert shown[name][key] == pytest.approx(expected[key], rel=1e-6)
                    else:
                        worst = max(worst, abs(shown[name][key] - expected[key]))
                        assert shown[name][key] == pytest.approx(expected[key], abs=0.01), \
                            (name, key, cc, rc)
    print(f"largest deviation from Python on the grid: {worst:.2e} (° or dB)")


def test_the_fragment_sets_the_values_and_follows_the_sliders(browser, demo):
    out, _, maps = demo
    open_page(browser, out / "explore.html", "#cc=0.5p&rc=5k")
    shown = table(browser)
    for name, cmap in maps.items():
        assert shown[name]["phase_margin_deg"] == pytest.approx(
            python_prediction(cmap, 0.5e-12, 5e3)["phase_margin_deg"], abs=0.01)
    browser.execute_script("""
        const s = document.getElementById('cc-slider');
        s.value = 700; s.dispatchEvent(new Event('input'));""")
    fragment = browser.execute_script("return location.hash")
    cc = browser.execute_script("return AMP.ui.state.cc")
    assert fragment.startswith("#cc=") and "&rc=5k" in fragment
    before = table(browser)
    for name, cmap in maps.items():  # the slider's own value, predicted in Python
        assert before[name]["phase_margin_deg"] == pytest.approx(
            python_prediction(cmap, cc, 5e3)["phase_margin_deg"], abs=0.01)
    open_page(browser, out / "explore.html", fragment)  # the link reopens the same what-if
    again = table(browser)
    for name in maps:
        assert again[name]["phase_margin_deg"] == pytest.approx(
            before[name]["phase_margin_deg"], abs=1e-3)


def test_the_jumps_go_to_the_netlist_and_the_simulated_points(browser, demo):
    out, results, maps = demo
    open_page(browser, out / "explore.html")
    labels = [b.text for b in browser.find_elements("css selector", "#jumps button")]
    assert labels[0] == "netlist values" and labels[1] == "chosen values"
    assert len(labels) == 2 + len(results["history"])
    browser.find_elements("css selector", "#jumps button")[0].click()
    start = results["values_in_netlist"]
    shown = table(browser)
    for name, cmap in maps.items():
        assert shown[name]["phase_margin_deg"] == pytest.approx(
            python_prediction(cmap, start["cc"], start["rc"])["phase_margin_deg"], abs=0.01)
    browser.find_elements("css selector", "#jumps button")[2].click()  # a map sample
    state = browser.find_element("id", "state").text
    assert "This point was simulated" in state
    first = results["history"][0]
    shown = table(browser)
    worst = min(shown.values(), key=lambda f: f["phase_margin_deg"])
    # reference: the simulation of that sample (results.json's history)
    assert worst["phase_margin_deg"] == pytest.approx(first["worst_phase_margin_deg"], abs=0.01)


def test_a_bad_typed_value_is_refused_in_words(browser, demo):
    out, _, _ = demo
    open_page(browser, out / "explore.html")
    before = browser.execute_script("return AMP.ui.state.cc")
    browser.execute_script("""
        const field = document.getElementById('cc-text');
        field.value = '2x'; field.dispatchEvent(new Event('change'));""")
    assert "not a value: 2x" in browser.find_element("id", "state").text
    assert browser.execute_script("return AMP.ui.state.cc") == before


def test_the_plots_are_drawn(browser, demo, tmp_path):
    out, _, _ = demo
    open_page(browser, out / "explore.html")
    for canvas in ("magnitude", "phase", "map"):
        inked = browser.execute_script("""
            const c = document.getElementById(arguments[0]), ctx = c.getContext('2d');
            const px = ctx.getImageData(0, 0, c.width, c.height).data;
            let n = 0;
            for (let k = 3; k < px.length; k += 4) if (px[k] > 0) n++;
            return n / (c.width * c.height);""", canvas)
        assert inked > 0.05, canvas  # the axes alone ink less than the curves and the map
    shot = tmp_path / "explore.png"
    assert browser.save_screenshot(str(shot))
    assert shot.stat().st_size > 20_000


# ---- a synthetic page: the nodal macromodel at 30 invented corners ---------------------------

def synthetic(corners: int, points: int = 400) -> tuple[dict, dict[str, CompensationMap]]:
    """results.json and maps of ``corners`` macromodels (invented values), each map from
    three exact loop gains of the nodal analysis, ``points`` frequencies 1 Hz – 10 GHz."""
    f = np.logspace(0, 10, points)
    samples = ((0.3e-12, 0.0), (1.5e-12, 0.0), (6e-12, 0.0))
    maps, rows = {}, []
    for k in range(corners):
        model = Macromodel(cl=(1 + 3 * k / max(corners - 1, 1)) * 1e-12, gm2=(0.8 + 0.02 * k) * 1e-3)
        responses = [FrequencyResponse(f, exact_loop_gain(model.with_(cc=cc, rc=rc), f))
                     for cc, rc in samples]
        name = f"corner_{k:03d}"
        maps[name] = CompensationMap.from_loop_gains(samples, responses)
        rows.append({"name": name, "status": "ok", "model": model})
    results = {"job": "synthetic (invented)", "command": "tune", "strategy": "map",
               "status": "converged", "target": {"phase_margin_deg": 60.0, "gain_margin_db": 10.0},
               "values": {"cc": 1e-12, "rc": 5e3}, "values_in_netlist": {"cc": 2e-12, "rc": 0.0},
               "bounds": {"cc": [0.1e-12, 20e-12], "rc": [0.0, 50e3]}, "history": [],
               "corners": rows}
    return results, maps


def write_synthetic(folder: Path, corners: int) -> tuple[Path, dict, dict]:
    results, maps = synthetic(corners)
    models = {c["name"]: c.pop("model") for c in results["corners"]}
    path = folder / "explore.html"
    path.write_text(explore_page(results, maps), encoding="utf-8")
    return path, models, maps


def test_the_page_equals_the_exact_loop_gain_of_the_nodal_model(browser, tmp_path):
    path, models, maps = write_synthetic(tmp_path, 6)
    open_page(browser, path)
    f = next(iter(maps.values())).frequency_hz
    for cc_text, cc, rc_text, rc in (("0.4p", 0.4e-12, "0", 0.0), ("1p", 1e-12, "5k", 5e3),
                                     ("3.3p", 3.3e-12, "12k", 12e3), ("15p", 15e-12, "40k", 40e3)):
        type_values(browser, cc_text, rc_text)
        shown = table(browser)
        for name, model in models.items():  # reference: own nodal analysis at (Cc, Rc)
            exact = loop_margins(FrequencyResponse(
                f, exact_loop_gain(model.with_(cc=cc, rc=rc), f))).as_dict()
            assert shown[name]["phase_margin_deg"] == pytest.approx(exact["phase_margin_deg"],
                                                                     abs=0.01)
            assert shown[name]["unity_gain_hz"] == pytest.approx(exact["unity_gain_hz"], rel=1e-4)


def test_a_slider_redraws_30_corners_of_400_points_within_50_ms(browser, tmp_path):
    path, _, _ = write_synthetic(tmp_path, 30)
    open_page(browser, path)
    times = browser.execute_script("""
        const times = [];
        for (const [id, values] of [['cc-slider', [100, 300, 500, 700, 900, 450, 250, 650]],
                                    ['rc-slider', [0, 200, 400, 600, 800, 1000, 100]]]) {
          const s = document.getElementById(id);
          for (const v of values) {
            s.value = v;
            const t0 = performance.now();
            s.dispatchEvent(new Event('input'));  // redraws the table and plots at once
            times.push(performance.now() - t0);
          }
        }
        return times;""")
    print(f"redraw of 30 corners × 400 points: median {statistics.median(times):.1f} ms, "
          f"max {max(times):.1f} ms")
    assert statistics.median(times) < 50.0
    assert len(table(browser)) == 30


def test_a_page_of_100_corners_stays_under_5_mb(tmp_path):
    path, _, _ = write_synthetic(tmp_path, 100)
    size = path.stat().st_size
    print(f"explore.html of 100 corners × 400 points: {size / 1e6:.2f} MB")
    assert size < 5e6
    # the maps are stored as float64 coefficients: nothing rounded away
    text = path.read_text(encoding="utf-8")
    data = json.loads(text.split('id="amploop-data">', 1)[1].split("</script>", 1)[0])
    stored = np.frombuffer(base64.b64decode(data["grids"][0]), "<f8")
    assert np.array_equal(stored, np.logspace(0, 10, 400))


def test_explore_rebuilds_the_page_and_refuses_a_folder_without_maps(demo, tmp_path, capsys):
    out, _, _ = demo
    copy = tmp_path / "copy"
    shutil.copytree(out, copy)
    (copy / "explore.html").unlink()
    assert main(["explore", str(copy)]) == 0
    assert (copy / "explore.html").read_text(encoding="utf-8") == \
        (out / "explore.html").read_text(encoding="utf-8")
    measured = tmp_path / "measured"
    main(["measure", str(DEMO / "job.toml"), "--out", str(measured), "--quiet", "--no-report"])
    capsys.readouterr()
    assert main(["explore", str(measured)]) == 2
    assert "needs a tune with the map strategy" in capsys.readouterr().err


def test_a_mosfet_for_rc_is_predicted_by_the_square_law_and_says_so(browser, tmp_path):
    out = tmp_path / "triode"
    assert main(["tune", str(DEMO / "job_triode.toml"), "--out", str(out), "--quiet"]) == 0
    with load_report_data(out) as data:
        maps = {name: data.maps[name] for name in data.maps}
        results = data.results
    size_ref = [h for h in results["history"] if h["kind"] == "characterise"][-1]["values"]["rc"]
    size = 0.8 * results["values"]["rc"]
    open_page(browser, out / "explore.html", f"#cc=0.3p&size={size!r}")
    assert "square law" in browser.find_element("id", "state").text
    shown = table(browser)
    for name, cmap in maps.items():  # reference: R ∝ 1/W (analysis.triode) on the Python map
        r = cmap.samples[0][1] * size_ref / size
        assert shown[name]["phase_margin_deg"] == pytest.approx(
            python_prediction(cmap, 0.3e-12, r)["phase_margin_deg"], abs=0.01)
    open_page(browser, out / "explore.html")
    shown = table(browser)
    for corner in results["corners"]:  # an estimate: near the verified simulation, not equal
        assert shown[corner["name"]]["phase_margin_deg"] == pytest.approx(
            corner["phase_margin_deg"], abs=0.5)
