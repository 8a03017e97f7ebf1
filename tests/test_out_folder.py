"""The out folder holds one run's files only: nothing stale that looks current, no run
changing it while the report is drawn, no partial report after a full disk.

The full disk is the kernel's file-size limit (RLIMIT_FSIZE, with SIGXFSZ ignored so that
writes fail with EFBIG), as in tests/test_faults.py.
"""

from __future__ import annotations

import fcntl
import json
import resource
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest
from nodal import Macromodel

import amploop.report
from amploop.cli import main
from amploop.corners.outputs import OutFolder


def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text()
    assert old in text, f"{old!r} not in {path}"
    path.write_text(text.replace(old, new))


def error_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in err, err
    return lines[0]


@pytest.fixture
def job(macro_job) -> Path:
    return macro_job(Macromodel(cc=1.5e-12, rc=800.0), corners={"light": 1e-12, "heavy": 5e-12})


@pytest.fixture
def measured(job, tmp_path) -> Path:
    """An out folder of a finished measurement (no step checks: quick)."""
    out = tmp_path / "out"
    assert main(["measure", str(job), "--out", str(out), "--workers", "1", "--no-report",
                 "--quiet"]) == 0
    return out


def test_per_corner_files_of_an_earlier_job_are_removed(job, measured, capsys):
    """A corner renamed, and a corner that fails this time (a behavioural source with no
    DC solution, as in tests/test_bad_input.py): their old CSVs and decks must not stay
    beside the new ones as if this run had written them."""
    assert sorted(p.name for p in (measured / "loop_gain").iterdir()) == ["heavy.csv",
                                                                          "light.csv"]
    (measured / "decks" / "light-loop_gain.txt").write_text("the user's own rerun\n")
    edit(job, 'name = "light"', 'name = "lite"')
    edit(job, "params = { cl = 1e-12 }", "params = { cl = 1e-12, k = 0 }")
    edit(job, "params = { cl = 5e-12 }", "params = { cl = 5e-12, k = 1 }")
    edit(job.parent / "macro.cir", ".ends", "Bx 0 nx I={k}*exp(40*v(nx))\nRx nx 0 1k\n.ends")
    code = main(["measure", str(job), "--out", str(measured), "--workers", "1", "--no-report",
                 "--quiet"])
    assert code == 1  # heavy has no DC operating point
    capsys.readouterr()
    assert sorted(p.name for p in (measured / "loop_gain").iterdir()) == ["lite.csv"]
    assert sorted(p.name for p in (measured / "decks").iterdir()) == [
        "heavy.cir", "light-loop_gain.txt", "lite.cir"]  # the deck that failed stays to rerun


def test_a_failed_tune_leaves_no_per_corner_files_of_an_earlier_run(job, measured, capsys):
    """Every corner without a DC solution: tune has no loop gain to write; the earlier
    measurement's CSVs go, and any deck left is this run's."""
    edit(job, "[analysis]", "[target]\nphase_margin = 60\n[analysis]")
    edit(job.parent / "macro.cir", ".ends", "Bx 0 nx I=exp(40*v(nx))\nRx nx 0 1k\n.ends")
    started_ns = time.time_ns()
    code = main(["tune", str(job), "--out", str(measured), "--workers", "1", "--no-report",
                 "--quiet"])
    capsys.readouterr()
    assert code != 0
    results = json.loads((measured / "results.json").read_text())
    assert results["command"] == "tune" and results["status"] != "converged"
    assert list((measured / "loop_gain").glob("*.csv")) == []
    assert all(deck.stat().st_mtime_ns >= started_ns
               for deck in (measured / "decks").glob("*.cir"))


def test_the_report_command_is_refused_while_a_run_holds_the_folder(measured):
    with OutFolder(measured).lock():  # this process holds it; the report runs in another
        run = subprocess.run([sys.executable, "-m", "amploop.cli", "report", str(measured)],
                             capture_output=True, text=True, timeout=120, check=False)
    assert run.returncode == 4, run.stderr
    assert "another amploop run" in error_line(run.stderr)
    assert not (measured / "report.pdf").exists()


def _lock_is_free(out: Path) -> bool:
    with open(out / ".amploop.lock", "a+") as handle:
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            return False
        fcntl.flock(handle, fcntl.LOCK_UN)
        return True


@pytest.mark.parametrize("command", ["measure", "tune"])
def test_the_report_of_a_run_is_drawn_while_the_run_still_holds_the_folder(
        job, tmp_path, capsys, monkeypatch, command):
    """While measure's (tune's) report is drawn, a second run on the folder, a real
    process, is refused; before, it started between the run and its report, and the
    report then read a results.json the other run was rewriting."""
    if command == "tune":
        edit(job, "[analysis]", "[target]\nphase_margin = 60\ntolerance = 2\n[analysis]")
    out = tmp_path / "out"
    seen = {}
    real = amploop.report.build_report

    def build_report(folder, **options):
        seen["lock free"] = _lock_is_free(out)
        second = subprocess.run(
            [sys.executable, "-m", "amploop.cli", "measure", str(job), "--out", str(out),
             "--workers", "1", "--no-report", "--quiet"],
            capture_output=True, text=True, timeout=120, check=False)
        seen["second"] = second.returncode, second.stderr
        return real(folder, **options)

    monkeypatch.setattr(amploop.report, "build_report", build_report)
    code = main([command, str(job), "--out", str(out), "--workers", "1", "--quiet"])
    capsys.readouterr()
    assert code == 0
    assert seen["lock free"] is False
    returncode, err = seen["second"]
    assert returncode == 4 and "another amploop run" in error_line(err)
    assert (out / "report.pdf").is_file()
    assert _lock_is_free(out)  # and let go at the end


def _file_size_limit(size_bytes: int):
    def apply() -> None:
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)
        resource.setrlimit(resource.RLIMIT_FSIZE, (size_bytes, size_bytes))
    return apply


@pytest.mark.parametrize("limit_bytes, options", [
    (5_000, ["--no-png"]),  # the PDF's compressed stream fails half-way
    (60_000, []),  # a PNG copy fails
])
def test_a_full_disk_while_the_report_is_written_is_one_line_and_leaves_no_file(
        measured, limit_bytes, options):
    """Before: "internal error: Error -2 while flushing" (zlib, from the PDF writer
    closing a stream whose write had failed), and ``.report.pdf.tmp`` left behind."""
    assert main(["report", str(measured)]) == 0  # an earlier report
    run = subprocess.run([sys.executable, "-m", "amploop.cli", "report", str(measured),
                          *options], capture_output=True, text=True, timeout=300,
                         preexec_fn=_file_size_limit(limit_bytes), check=False)
    assert run.returncode == 4, run.stderr
    line = error_line(run.stderr)
    assert "cannot write the report" in line and "File too large" in line, line
    assert [p.name for p in measured.rglob("*") if ".tmp" in p.name] == []
    assert not (measured / "report.pdf").exists()  # not the earlier one either
    if not options:
        assert list((measured / "report").iterdir()) == []
    assert main(["report", str(measured)]) == 0  # with room again
    assert (measured / "report.pdf").is_file() and list((measured / "report").iterdir())
