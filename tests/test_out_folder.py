"""The out folder as a user handles it: moved elsewhere, or left behind by Ctrl-C.

References: ngspice itself, run by hand (``ngspice -b``) on the decks amploop leaves, must
give the loop gain amploop recorded; a real SIGINT to a running ``amploop`` process.
"""

from __future__ import annotations

import json
import shutil
import subprocess
from pathlib import Path

import numpy as np
from conftest import DEMO

from amploop.cli import main
from amploop.cluster import include_targets


def nested_demo_job(folder: Path) -> Path:
    """The demo job (invented circuit and cards) with its files spread over sub-folders
    and included through one another: the netlist ``.include``s ``parts/extra.cir``
    (relative), the models file is ``lib/wrapper.lib`` whose sections read the demo's
    cards from ``cards/models.lib``, by an absolute path in section tt and a relative one
    in the others."""
    (folder / "parts").mkdir(parents=True)
    (folder / "lib").mkdir()
    (folder / "cards").mkdir()
    shutil.copy(DEMO / "models.lib", folder / "cards" / "models.lib")
    cards = folder / "cards" / "models.lib"
    (folder / "lib" / "wrapper.lib").write_text(
        f'* invented wrapper\n.lib tt\n.lib "{cards}" tt\n.endl tt\n'
        '.lib ss\n.lib "../cards/models.lib" ss\n.endl ss\n'
        '.lib ff\n.lib ../cards/models.lib ff\n.endl ff\n')
    (folder / "parts" / "extra.cir").write_text("* invented: a parameter the netlist reads\n"
                                                ".param rbleed=1e12\n")
    netlist = (DEMO / "two_stage.cir").read_text()
    netlist = '.include "parts/extra.cir"\n' + netlist.replace(
        ".ends two_stage", "Rbleed out vss {rbleed}\n.ends two_stage")
    (folder / "two_stage.cir").write_text(netlist)
    job = (DEMO / "job.toml").read_text().replace('models = "models.lib"',
                                                  'models = "lib/wrapper.lib"')
    (folder / "job.toml").write_text(job)
    return folder / "job.toml"


def test_decks_rerun_by_hand_after_the_out_folder_is_copied_elsewhere(tmp_path, capsys):
    """Copy the out folder away, delete the job's folder, run ngspice -b in the copy's
    decks/: every corner's deck runs and writes the loop gain amploop measured."""
    job = nested_demo_job(tmp_path / "job")
    out = tmp_path / "out"
    assert main(["measure", str(job), "--out", str(out), "--workers", "2", "--no-report",
                 "--quiet"]) == 0
    capsys.readouterr()
    moved = tmp_path / "elsewhere" / "copy"
    shutil.copytree(out, moved)
    shutil.rmtree(tmp_path / "job")
    shutil.rmtree(out)
    decks = moved / "decks"
    for deck in sorted(decks.glob("*.cir")):
        proc = subprocess.run(["ngspice", "-b", deck.name], cwd=decks, capture_output=True,
                              text=True, timeout=120, check=False)
        assert proc.returncode == 0, f"{deck.name}: {proc.stdout[-800:]} {proc.stderr[-800:]}"
        read = include_targets(deck.read_text())
        assert read and not [p for p in read if Path(p).is_absolute()], read
        by_hand = np.loadtxt(decks / f"{deck.stem}-loop_gain.txt")
        recorded = np.loadtxt(moved / "loop_gain" / f"{deck.stem}.csv", delimiter=",",
                              skiprows=1)
        np.testing.assert_allclose(by_hand[:, 0], recorded[:, 0], rtol=1e-8)  # wrdata: 9 digits
        np.testing.assert_allclose(by_hand[:, 1] + 1j * by_hand[:, 2],
                                   recorded[:, 3] + 1j * recorded[:, 4], rtol=1e-6)
    assert len(list(decks.glob("*.cir"))) == 10
    assert json.loads((moved / "results.json").read_text())["status"] == "ok"
