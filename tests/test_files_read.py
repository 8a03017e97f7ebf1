"""Every file a deck reads, as ngspice reads it: hashed for reuse, loops and odd files refused.

The references are ngspice 39's own reactions, measured on small decks before these
checks existed: a file that includes itself (directly or through another) made ngspice
crash with signal 11, a ``.lib`` section that reads itself made it loop until killed, and
a file that begins with a UTF-8 byte-order mark gave "Mismatch of .subckt ... .ends
statements" when ngspice opened it itself.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from test_deck_injection import one_corner_demo, run

from amploop.bench.amplifier import prepare_amplifier
from amploop.corners.measure import measure
from amploop.spec.job import load_job


def cards_in_a_file_the_models_include(folder: Path) -> Path:
    """Move the tt section's model cards of the one-corner demo into ``tt_cards.inc``, which
    the section includes; returns that file."""
    models = folder / "models.lib"
    text = models.read_text()
    start = text.index(".lib tt\n") + len(".lib tt\n")
    end = text.index(".endl tt")
    cards = folder / "tt_cards.inc"
    cards.write_text(text[start:end])
    models.write_text(text[:start] + '.include "tt_cards.inc"\n' + text[end:])
    return cards


def test_an_edit_in_a_file_the_models_file_includes_is_simulated_again(tmp_path):
    job = one_corner_demo(tmp_path / "job")
    cards = cards_in_a_file_the_models_include(tmp_path / "job")
    first = measure(load_job(job), out=tmp_path / "out", workers=1, time_domain=False)
    again = measure(load_job(job), out=tmp_path / "out", workers=1, time_domain=False)
    assert (again.ac_run, again.ac_reused) == (0, first.ac_run)  # unchanged: all reused
    # a faster n-channel device (KP 280 -> 400 uA/V^2): a different loop gain
    text = cards.read_text()
    assert "kp=280u" in text
    cards.write_text(text.replace("kp=280u", "kp=400u", 1))
    edited = measure(load_job(job), out=tmp_path / "out", workers=1, time_domain=False)
    assert (edited.ac_run, edited.ac_reused) == (first.ac_run, 0)
    before = first.corners[0].margins.phase_margin_deg
    after = edited.corners[0].margins.phase_margin_deg
    assert abs(after - before) > 0.1, (before, after)
    assert cards in prepare_amplifier(load_job(job)).files


@pytest.mark.parametrize("shape", ["self", "pair", "section"])
def test_an_include_loop_is_refused_naming_the_files(tmp_path, capsys, shape):
    job = one_corner_demo(tmp_path)
    amp = tmp_path / "amp.cir"
    if shape == "self":
        (tmp_path / "a.inc").write_text('* includes itself\n.include "a.inc"\n')
        names = ["a.inc"]
    elif shape == "pair":
        (tmp_path / "a.inc").write_text('* a\n.include "b.inc"\n')
        (tmp_path / "b.inc").write_text('* b\n.include "a.inc"\n')
        names = ["a.inc", "b.inc"]
    else:
        (tmp_path / "a.inc").write_text('.lib sec\n.lib "a.inc" sec\n.endl sec\n')
        names = ["a.inc", "section sec"]
    directive = '.lib "a.inc" sec' if shape == "section" else '.include "a.inc"'
    amp.write_text(amp.read_text() + f"\n{directive}\n")
    code, err = run(job, tmp_path / "out", capsys)
    assert code == 2 and len(err) == 1, err
    assert "loop" in err[0] and all(name in err[0] for name in names), err
    assert "crashed" not in err[0]


def test_a_directory_a_device_and_a_fifo_given_to_include_each_get_their_own_message(
        tmp_path, capsys):
    fifo = tmp_path / "pipe"
    os.mkfifo(fifo)
    (tmp_path / "folder").mkdir()
    for target, expected in ((tmp_path / "folder", "is a directory"),
                             (Path("/dev/null"), "is a device"),
                             (fifo, "named pipe (FIFO)")):
        job = one_corner_demo(tmp_path / f"job_{target.name}")
        amp = job.parent / "amp.cir"
        amp.write_text(amp.read_text() + f'\n.include "{target}"\n')
        code, err = run(job, job.parent / "out", capsys)
        assert code == 2 and len(err) == 1, err
        assert expected in err[0] and "amp.cir" in err[0] and "not found" not in err[0], err


def bom_netlist(path: Path) -> None:
    """The demo amplifier with a byte-order mark and ``.subckt`` on the first line."""
    text = path.read_text()
    path.write_text("\ufeff" + text[text.index(".subckt"):], encoding="utf-8")


@pytest.mark.parametrize("where", ["netlist", "included"])
def test_a_byte_order_mark_before_a_first_line_subckt_is_read(tmp_path, where):
    plain = measure(load_job(one_corner_demo(tmp_path / "plain")), out=None, workers=1,
                    time_domain=False)
    job = one_corner_demo(tmp_path / "bom")
    amp = job.parent / "amp.cir"
    if where == "netlist":
        bom_netlist(amp)
    else:
        amp.rename(job.parent / "amp.inc")
        bom_netlist(job.parent / "amp.inc")
        amp.write_text('* the amplifier is in amp.inc\n.include "amp.inc"\n')
    result = measure(load_job(job), out=None, workers=1, time_domain=False)
    assert result.corners[0].status == "ok", result.corners[0].error
    assert (result.corners[0].margins.phase_margin_deg
            == pytest.approx(plain.corners[0].margins.phase_margin_deg, abs=1e-9))


def test_a_byte_order_mark_in_a_file_ngspice_opens_itself_is_named(tmp_path, capsys):
    job = one_corner_demo(tmp_path)
    models = tmp_path / "models.lib"
    models.write_text("\ufeff" + models.read_text(), encoding="utf-8")
    code, err = run(job, tmp_path / "out", capsys)
    assert code == 2 and len(err) == 1
    assert "byte-order mark" in err[0] and "models.lib" in err[0], err
