"""The designer's own closed-loop testbench with a marked break ([testbench]).

References: amploop's own generated testbench for the same circuit (a user deck that
reproduces it element for element must give the same loop gain), and the exact nodal
model of tests/nodal.py (Bode's return ratio of gm1, H. W. Bode 1945) for a deck amploop
cannot build itself: switches of invented resistance in series with each capacitor.
"""

from __future__ import annotations

import numpy as np
import pytest
from nodal import Macromodel, dense_margins, exact_loop_gain

from amploop.cli import main
from amploop.corners.measure import measure
from amploop.spec.job import load_job

MODEL = Macromodel(cc=1.5e-12, rc=800.0, kind="capacitive", z_in=2e-12, z_fb=1e-12,
                   r_dc=1e9, cl=2e-12)

#: A closed-loop deck of the user's own (invented): amploop's capacitive testbench of
#: MODEL written out by hand, with a title, an include of the amplifier, its own .param,
#: .temp and analysis, and the break Vbrk from the output to the feedback network.
DECK = """my own gain-of-2 bench (invented)
.include "macro.cir"
.param cl=5p
.temp 85
Xamp inp inn out macro
Vcm inp 0 dc 0.9
Vsig sig 0 dc 0.9
Cin sig inn{sw_in} 2p
Cfb fb{sw_fb} inn 1p
Rdc fb inn 1e9
Cload out 0 {{cl}}
Vbrk out fb 0
{switches}.ac dec 10 1 1g
.end
"""


def write_deck(folder, r_sw: float = 0.0) -> None:
    """The deck in ``folder``, with switches of ``r_sw`` ohms in series with Cin and Cfb
    (none at 0)."""
    if r_sw:
        text = DECK.format(sw_in="_s", sw_fb="_s", switches=f"Rsw_in sig inn_s {r_sw!r}\n"
                           f"Rsw_fb fb_s inn {r_sw!r}\n")
        text = text.replace("Cin sig inn_s 2p", "Cin inn_s inn 2p").replace(
            "Cfb fb_s inn 1p", "Cfb fb fb_s 1p")
    else:
        text = DECK.format(sw_in="", sw_fb="", switches="")
    (folder / "tb.cir").write_text(text)


def job(folder, **testbench) -> dict:
    (folder / "macro.cir").write_text(MODEL.netlist())
    return {
        "name": "own_bench",
        "amplifier": {"netlist": "macro.cir", "subckt": "macro", "in_p": "inp", "in_n": "inn",
                      "out": "out"},
        "testbench": {"netlist": "tb.cir", "break": "Vbrk", **testbench},
        "compensation": {"cc": {"param": "cc", "min": "0.2p", "max": "10p"},
                         "rc": {"param": "rc", "min": "0", "max": "20k"}},
        "analysis": {"start": "1", "stop": "10G", "points_per_decade": 40},
        "corners": [{"name": "light", "params": {"cl": 1e-12}},
                    {"name": "heavy", "params": {"cl": 3e-12}}],
    }


def own_testbench_job(folder) -> dict:
    """The same circuit in amploop's own testbench."""
    data = job(folder)
    del data["testbench"]
    data["bias"] = {"common_mode": "0.9"}
    data["feedback"] = {"kind": "capacitive", "input": "2p", "feedback": "1p", "dc_path": "1G",
                        "load": "{cl}"}
    return data


def test_a_deck_that_reproduces_the_generated_testbench_gives_the_same_loop_gain(tmp_path):
    write_deck(tmp_path)
    theirs = measure(load_job(job(tmp_path), base=tmp_path), workers=1, time_domain=False)
    ours = measure(load_job(own_testbench_job(tmp_path), base=tmp_path), workers=1,
                   time_domain=False)
    for a, b in zip(theirs.corners, ours.corners):
        assert a.status == "ok", a.problem
        relative = np.max(np.abs(a.loop_gain.values - b.loop_gain.values)
                          / np.abs(b.loop_gain.values))
        assert relative < 1e-6, (a.corner.name, relative)
    # the corner's load reached the deck although the deck sets cl itself
    assert theirs.corners[0].margins.phase_margin_deg != theirs.corners[1].margins.phase_margin_deg


def test_switch_resistances_are_confirmed_by_the_nodal_model(tmp_path):
    write_deck(tmp_path, r_sw=2e3)
    result = measure(load_job(job(tmp_path), base=tmp_path), workers=1, time_domain=False)
    f = np.logspace(0, 10, 801)
    for corner, cl in zip(result.corners, (1e-12, 3e-12)):
        exact = MODEL.with_(cl=cl, r_sw=2e3)
        pm, ugf, _ = dense_margins(f, exact_loop_gain(exact, f)[None, :])
        assert corner.margins.phase_margin_deg == pytest.approx(pm[0], abs=0.05)
        assert corner.margins.unity_gain_hz == pytest.approx(ugf[0], rel=1e-3)
        without = dense_margins(f, exact_loop_gain(exact.with_(r_sw=0.0), f)[None, :])[0][0]
        assert abs(pm[0] - without) > 0.5  # the switches matter: the check above can fail


def _refused(tmp_path, capsys, data: dict) -> str:
    from test_fd_measure import _job_file

    path = _job_file(tmp_path, data)
    text = path.read_text()
    if "testbench" in data:
        text += "[testbench]\n" + "".join(f'{k} = "{v}"\n' for k, v in data["testbench"].items())
    for c in data.get("corners", []):
        text += f'[[corners]]\nname = "{c["name"]}"\nparams = {{ cl = {c["params"]["cl"]!r} }}\n'
    path.write_text(text)
    code = main(["measure", str(path), "--out", str(tmp_path / "out"), "--no-report",
                 "--workers", "1"])
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    return code, lines[0]


@pytest.mark.parametrize("edit, words", [
    (("Vbrk out fb 0", "Vbreak out fb 0"), "'Vbrk' is not an element of the testbench"),
    (("Vbrk out fb 0", "Vbrk out fb 0\nRbrk_x fb fb2 1"), None),
    (("Vbrk out fb 0", "Vbrk out fb dc 0.1"), "is not a 0 V source"),
])
def test_a_break_that_is_missing_or_not_0v_is_refused(tmp_path, capsys, edit, words):
    write_deck(tmp_path)
    deck = tmp_path / "tb.cir"
    deck.write_text(deck.read_text().replace(*edit))
    if words is None:  # a resistor named as the break
        data = job(tmp_path, **{"break": "Rbrk_x"})
        words = "is not a voltage source"
    else:
        data = job(tmp_path)
    code, line = _refused(tmp_path, capsys, data)
    assert code == 2 and "[testbench].break" in line and words in line


def test_a_break_off_the_loop_is_said_to_be(tmp_path, capsys):
    """Vbrk moved into the load's branch: nothing loops back through it."""
    write_deck(tmp_path)
    deck = tmp_path / "tb.cir"
    deck.write_text(deck.read_text().replace("Cload out 0", "Cload ld 0").replace(
        "Vbrk out fb 0", "Vbrk out ld 0\nVshort out fb 0"))
    result = measure(load_job(job(tmp_path), base=tmp_path), workers=1, time_domain=False)
    corner = result.corners[0]
    assert corner.status == "error"
    assert "is the break on the feedback loop" in corner.error


def test_feedback_and_testbench_together_are_refused(tmp_path, capsys):
    write_deck(tmp_path)
    data = job(tmp_path)
    data["feedback"] = {"kind": "resistive", "input": "10k", "feedback": "10k"}
    code, line = _refused(tmp_path, capsys, data)
    assert code == 2 and "give [feedback] or [testbench], not both" in line


FD_DECK = """fully-differential bench of my own (invented)
Xamp inp inn outp outn vcm fdmacro
Vvcm vcm 0 dc 0
Vsig sig 0 dc 0
Vsign sign 0 dc 0
Rin sig inn 10000.0
Rfb fbp inn 20000.0
Rinn sign inp 10000.0
Rfbn fbn inp 20000.0
Cload outp 0 1e-11
Cloadn outn 0 1e-11
Vbrkp outp fbp 0
Vbrkn outn fbn 0
.end
"""


def test_a_fully_differential_deck_of_ones_own_gives_both_loops_as_amploops_own(tmp_path):
    """The FD macromodel (tests/nodal_fd.py) in a deck that reproduces amploop's own
    fully-differential testbench: two breaks, the common-mode break inside the subckt."""
    from nodal_fd import DEFAULT
    from test_fd_measure import fd_job

    own = fd_job(tmp_path, DEFAULT)
    (tmp_path / "fd_tb.cir").write_text(FD_DECK)
    theirs = {k: v for k, v in own.items() if k not in ("bias", "feedback")}
    theirs["testbench"] = {"netlist": "fd_tb.cir", "break": ["Vbrkp", "Vbrkn"]}
    a = measure(load_job(theirs, base=tmp_path), workers=1, time_domain=False).corners[0]
    b = measure(load_job(own, base=tmp_path), workers=1, time_domain=False).corners[0]
    assert a.status == "ok", a.problem
    for x, y in ((a.loop_gain, b.loop_gain), (a.common_mode_loop_gain, b.common_mode_loop_gain)):
        assert np.max(np.abs(x.values - y.values) / np.abs(y.values)) < 1e-6
