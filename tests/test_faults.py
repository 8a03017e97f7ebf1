"""Overnight runs that cannot be lost: each fault provoked for real, and what amploop does.

Every test here makes the fault happen (a worker killed with SIGKILL, a hung analysis, a
file-size limit set by the kernel, a held lock, a damaged journal, a netlist that fails in
the middle of a tuning loop, a netlist that asks ngspice to run shell commands) and checks
the promised outcome. The kill -9 of the coordinator is in tests/test_tune_demo.py.
"""

from __future__ import annotations

import json
import os
import resource
import signal
import sqlite3
import subprocess
import sys
import threading
import time
from pathlib import Path

import pytest
from conftest import DEMO

from amploop.cli import ExitCode, main
from amploop.corners.measure import measure
from amploop.corners.outputs import OutFolder
from amploop.errors import OutputError
from amploop.sim.journal import Journal
from amploop.sim.pool import WorkerPool
from amploop.spec.job import load_job
from amploop.strategy.tune import tune


def demo_copy(folder: Path, *, job_edit=None, netlist_edit=None) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    netlist = (DEMO / "two_stage.cir").read_text()
    (folder / "amp.cir").write_text(netlist_edit(netlist) if netlist_edit else netlist)
    text = (DEMO / "job.toml").read_text()
    text = text.replace('netlist = "two_stage.cir"', 'netlist = "amp.cir"')
    text = text.replace('models = "models.lib"', f'models = "{DEMO / "models.lib"}"')
    (folder / "job.toml").write_text(job_edit(text) if job_edit else text)
    return folder / "job.toml"


def slow(text: str) -> str:
    """20 001 points per AC analysis: long enough to be caught in the middle of one."""
    return text.replace("points_per_decade = 40", "points_per_decade = 2000")


class Killer(threading.Thread):
    """Kills the worker running ``victim`` with SIGKILL, ``times`` times."""

    def __init__(self, pool: WorkerPool, victim: str, times: int) -> None:
        super().__init__(daemon=True)
        self.pool, self.victim, self.times, self.kills = pool, victim, times, 0
        self.stop = threading.Event()

    def run(self) -> None:
        while not self.stop.is_set() and self.kills < self.times:
            for worker in list(self.pool._workers):
                if worker.queue and worker.queue[0].request.label == self.victim \
                        and worker.process.is_alive():
                    time.sleep(0.01)  # let the analysis start
                    try:
                        os.kill(worker.process.pid, signal.SIGKILL)
                        self.kills += 1
                    except ProcessLookupError:
                        pass
                    time.sleep(0.05)
            time.sleep(0.002)


def test_worker_killed_mid_analysis_is_replaced_and_the_analysis_retried(tmp_path):
    job = load_job(demo_copy(tmp_path / "job", job_edit=slow))
    victim = job.corners[3].name
    with WorkerPool(2) as pool:
        killer = Killer(pool, victim, times=1)
        killer.start()
        result = measure(job, out=tmp_path / "out", pool=pool, time_domain=False)
        killer.stop.set()
        started = pool.started_workers
    assert killer.kills == 1
    assert started >= 3  # the killed worker was replaced
    assert result.status == "ok"  # the retry measured it
    assert all(c.status == "ok" for c in result.corners)


def test_a_worker_that_keeps_dying_costs_bounded_retries_then_that_corner_errs(tmp_path):
    job = load_job(demo_copy(tmp_path / "job", job_edit=slow))
    victim = job.corners[3].name
    with WorkerPool(2, retries=2) as pool:
        killer = Killer(pool, victim, times=10)
        killer.start()
        result = measure(job, out=tmp_path / "out", pool=pool, time_domain=False)
        killer.stop.set()
    assert killer.kills == 3  # first try and two retries, then it gives up
    statuses = {c.corner.name: c for c in result.corners}
    assert statuses[victim].status == "error"
    assert "ngspice crashed" in statuses[victim].error and "signal 9" in statuses[victim].error
    assert "3 attempts" in statuses[victim].error
    assert statuses[victim].error_kind == "crash"
    assert all(c.status == "ok" for name, c in statuses.items() if name != victim)
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    failed = next(c for c in data["corners"] if c["name"] == victim)
    assert failed["phase_margin_deg"] is None and failed["error"]


def test_ngspice_that_cannot_recover_costs_its_worker_not_the_run(tmp_path):
    """ngspice's `quit` (in a .control block the user allowed) ends the shared library for
    good: each corner reports it, each broken worker is replaced, and the same pool then
    measures a healthy job."""
    job_path = demo_copy(tmp_path / "job")
    (tmp_path / "job" / "quit.inc").write_text("* asks ngspice to leave\n.control\nquit\n.endc\n")
    job_path.write_text(job_path.read_text().replace('models = "', 'includes = ["quit.inc"]\nmodels = "', 1))
    from amploop.bench.amplifier import prepare_amplifier  # noqa: F401  (imported for clarity

    with WorkerPool(2) as pool:
        broken = measure(load_job(job_path), out=tmp_path / "out", pool=pool, time_domain=False,
                         allow_control=True)
        replaced = pool.started_workers
        healthy = measure(load_job(DEMO / "job.toml"), out=tmp_path / "out2", pool=pool,
                          time_domain=False)
    assert all(c.status == "error" and "quit" in c.error for c in broken.corners)
    assert replaced >= len(broken.corners)
    assert healthy.status == "ok"


def test_hanging_analysis_is_ended_by_the_time_limit(tmp_path):
    """A sweep of 100 001 points under a 0.1 s limit: every corner reports the
    time-out, the workers are replaced, and the run ends in seconds, not hours."""
    def edit(text: str) -> str:
        text = text.replace("points_per_decade = 40", "points_per_decade = 10000")
        text = text.replace('stop = "10G"', 'stop = "10G"\ntime_limit = 0.1')
        return text[: text.index("[[corners]]")] + (
            '[[corners]]\nname = "a"\nlib = "tt"\nparams = { vdd = 1.8, cl = "2p" }\n'
            '[[corners]]\nname = "b"\nlib = "ss"\nparams = { vdd = 1.8, cl = "2p" }\n')
    job = load_job(demo_copy(tmp_path / "job", job_edit=edit))
    started = time.monotonic()
    with WorkerPool(2) as pool:
        result = measure(job, out=tmp_path / "out", pool=pool, time_domain=False)
        replaced = pool.started_workers
    assert time.monotonic() - started < 30
    assert [c.status for c in result.corners] == ["error", "error"]
    assert all("time-out" in c.error and "0.1 s" in c.error for c in result.corners)
    assert all(c.error_kind == "timeout" for c in result.corners)
    assert replaced >= 2


def _limited(size_bytes: int):
    def apply() -> None:
        signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # writes then fail with EFBIG
        resource.setrlimit(resource.RLIMIT_FSIZE, (size_bytes, size_bytes))
    return apply


def test_disk_full_is_a_clear_error_and_the_journal_resumes_afterwards(tmp_path):
    """The kernel's file-size limit stands in for a full disk: once the journal cannot
    grow, amploop stops with one line; with room again, a rerun opens the same journal and
    reuses what was recorded."""
    job = demo_copy(tmp_path / "job")
    out = tmp_path / "out"
    command = [sys.executable, "-m", "amploop.cli", "tune", str(job), "--out", str(out),
               "--no-report", "--workers", "1"]
    full = subprocess.run(command, capture_output=True, text=True, timeout=300,
                          preexec_fn=_limited(60_000), check=False)
    assert full.returncode == 4, full.stderr  # ExitCode.RESOURCE
    lines = [line for line in full.stderr.splitlines() if line.strip()]
    assert len(lines) == 1 and "Traceback" not in full.stderr
    assert "journal.sqlite" in lines[0] or "cannot write" in lines[0]
    with sqlite3.connect(out / "journal.sqlite") as db:
        recorded = db.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]
    again = subprocess.run(command + ["--resume"], capture_output=True, text=True, timeout=300,
                           check=False)
    assert again.returncode == 0, again.stderr
    results = json.loads((out / "results.json").read_text())
    assert results["status"] == "converged"
    assert results["ac_analyses"]["reused"] >= 2 * recorded


def test_a_file_a_worker_cannot_write_is_one_line_and_the_analyses_are_kept(tmp_path, capsys):
    """With every core simulating, the workers write the corners' files themselves. When
    they cannot (here a file stands where the loop_gain folder goes), the coordinator
    tries again, the run ends with one line, exit 4, and the analyses stay recorded."""
    out = tmp_path / "out"
    out.mkdir()
    (out / "loop_gain").write_text("in the way")
    args = ["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report", "--quiet"]
    assert main(args) == 4  # default --workers: the CPU count, so the workers write
    lines = [line for line in capsys.readouterr().err.splitlines() if line.strip()]
    assert len(lines) == 1 and "cannot write loop_gain/" in lines[0], lines
    (out / "loop_gain").unlink()
    assert main(args + ["--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    counts = summary["ac_analyses"]  # what was recorded before the failure is reused
    assert counts["reused"] >= 2 and counts["run"] + counts["reused"] == 20
    assert len(list((out / "loop_gain").glob("*.csv"))) == 10


def test_a_journal_whose_creation_was_cut_short_is_created_again(tmp_path):
    """A disk that fills while the journal is being created leaves an SQLite file with no
    tables (its first page only). That is an empty journal, not somebody else's file."""
    path = tmp_path / "journal.sqlite"
    with sqlite3.connect(path) as db:
        db.execute("PRAGMA journal_mode=WAL")
    db.close()
    assert path.stat().st_size > 0
    with Journal(path) as journal:
        assert journal.count() == 0
    with Journal(path, readonly=True) as journal:
        assert journal.count() == 0


def test_out_folder_that_cannot_be_created_is_one_line(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    code = main(["measure", str(DEMO / "job.toml"), "--out", str(blocker / "out"), "--no-report"])
    err = capsys.readouterr().err
    assert code == ExitCode.RESOURCE == 4  # not bad input: the folder cannot be made
    assert len(err.strip().splitlines()) == 1 and "cannot create the out folder" in err
    code = main(["measure", str(DEMO / "job.toml"), "--out", str(blocker), "--no-report"])
    err = capsys.readouterr().err
    assert code == 4
    assert len(err.strip().splitlines()) == 1 and "is a file, not a folder" in err
    assert blocker.read_text() == "not a folder"


def test_second_run_on_the_same_out_folder_is_refused(tmp_path, capsys):
    folder = OutFolder(tmp_path / "out")
    with folder.lock():
        code = main(["tune", str(DEMO / "job.toml"), "--out", str(tmp_path / "out"),
                     "--no-report"])
    err = capsys.readouterr().err
    assert code == 4
    assert "another amploop run" in err and f"pid {os.getpid()}" in err
    assert not (tmp_path / "out" / "journal.sqlite").exists()  # never two writers


def test_journal_of_another_schema_is_refused_with_what_to_do(tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report"]) == 0
    with sqlite3.connect(out / "journal.sqlite") as db:
        db.execute("PRAGMA user_version=0")
    capsys.readouterr()
    code = main(["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report"])
    err = capsys.readouterr().err
    assert code == 4
    assert "schema 0" in err and "new --out folder" in err


def test_corrupt_journal_is_refused_never_reused(tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report"]) == 0
    journal = out / "journal.sqlite"
    for extra in out.glob("journal.sqlite-*"):
        extra.unlink()
    data = bytearray(journal.read_bytes())
    data[100:4000] = os.urandom(3900)  # damage the header's tail and the first pages
    journal.write_bytes(bytes(data))
    capsys.readouterr()
    code = main(["measure", str(DEMO / "job.toml"), "--out", str(out), "--no-report"])
    err = capsys.readouterr().err
    assert code == 4
    assert "journal" in err and ("corrupt" in err or "unreadable" in err or "not an amploop" in err)


def test_a_failure_in_the_middle_of_tuning_never_reaches_the_results(tmp_path):
    """The netlist cannot be simulated whenever Cc is below 0.33 pF (a resistor of 1/0 Ω,
    which ngspice refuses), and the map strategy first asks for that at verification: the
    failed analyses give no margins anywhere."""
    def netlist_edit(text: str) -> str:
        return text.replace(".ends", "Rq nq 0 {1/(cc < 0.33p ? 0 : 1)}\n.ends")
    job = load_job(demo_copy(tmp_path / "job", netlist_edit=netlist_edit))
    result = tune(job, out=tmp_path / "out", workers=2)
    assert result.status == "failed"
    data = json.loads((tmp_path / "out" / "results.json").read_text())
    assert data["status"] == "failed"
    for corner in data["corners"]:
        assert corner["status"] == "error"
        for key in ("phase_margin_deg", "unity_gain_hz", "gain_margin_db", "overshoot_pct"):
            assert corner[key] is None
    verify = [h for h in data["history"] if h["kind"] == "verify"]
    assert verify and verify[-1]["worst_phase_margin_deg"] is None
    with sqlite3.connect(tmp_path / "out" / "journal.sqlite") as db:
        recorded = db.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]
    assert recorded == 3 * len(job.corners)  # only the characterisations that succeeded


# --- security ------------------------------------------------------------------------------


@pytest.mark.parametrize("where, block", [
    ("netlist", ".control\nshell touch {marker}\n.endc\n"),
    ("netlist", "  .CONTROL\n  shell touch {marker}\n  .ENDC\n"),
    ("include", ".control\nshell touch {marker}\n.endc\n"),
    ("models", ".control\nshell touch {marker}\n.endc\n"),
])
def test_control_blocks_that_reach_the_shell_are_refused(tmp_path, capsys, where, block):
    marker = tmp_path / "ran"
    text = block.format(marker=marker)

    def netlist_edit(netlist: str) -> str:
        return netlist + "\n" + text if where == "netlist" else netlist

    job = demo_copy(tmp_path / "job", netlist_edit=netlist_edit)
    if where == "include":
        (tmp_path / "job" / "extra.inc").write_text("* an include\n" + text)
        job.write_text(job.read_text().replace('models = "', 'includes = ["extra.inc"]\nmodels = "', 1))
    if where == "models":
        models = (DEMO / "models.lib").read_text() + "\n.lib extra\n" + text + ".endl extra\n"
        (tmp_path / "job" / "models.lib").write_text(models)
        job.write_text(job.read_text().replace(f'models = "{DEMO / "models.lib"}"', 'models = "models.lib"'))
    code = main(["measure", str(job), "--out", str(tmp_path / "out"), "--no-report"])
    err = capsys.readouterr().err
    assert code == 2
    line = err.strip().splitlines()
    assert len(line) == 1 and ".control block" in line[0] and "--allow-control" in line[0]
    assert any(name in line[0] for name in ("amp.cir", "extra.inc", "models.lib"))
    assert not marker.exists()


def test_allow_control_runs_a_block_its_author_trusts(tmp_path, capsys):
    marker = tmp_path / "ran"
    job = demo_copy(tmp_path / "job", netlist_edit=lambda n: n + f"\n.control\nshell touch {marker}\n.endc\n")
    code = main(["measure", str(job), "--out", str(tmp_path / "out"), "--no-report",
                 "--allow-control"])
    assert code == 0
    assert marker.exists()


@pytest.mark.parametrize("name", ["../../escaped", "a/b/c", "/etc/evil", "..", ".", "CON"])
def test_corner_and_job_names_never_write_outside_the_out_folder(tmp_path, name):
    def edit(text: str) -> str:
        text = text.replace('name = "demo_two_stage_sc_gain2"', f'name = {json.dumps(name)}')
        return text[: text.index("[[corners]]")] + (
            f'[[corners]]\nname = {json.dumps(name)}\nlib = "tt"\nparams = {{ vdd = 1.8, cl = "2p" }}\n')
    job = load_job(demo_copy(tmp_path / "job", job_edit=edit))
    out = tmp_path / "deep" / "out"
    result = measure(job, out=out, workers=1, time_domain=False)
    assert result.status == "ok"
    outside = [p for p in tmp_path.rglob("*") if out not in p.parents and p != out
               and tmp_path / "job" not in p.parents and p != tmp_path / "job" and p != out.parent]
    assert outside == []
    files = [p.name for p in (out / "loop_gain").iterdir()]
    assert len(files) == 1 and "/" not in files[0] and "\u0000" not in files[0]


@pytest.mark.parametrize("workers", [1, None])  # the coordinator writes; the workers write
def test_symbolic_links_in_the_out_folder_cannot_carry_a_write_outside(tmp_path, workers):
    """A link where a corner's folder or file goes, pointing outside the out folder, is
    refused with one line; what it points at is left as it was."""
    outside = tmp_path / "outside"
    outside.mkdir()
    victim = outside / "victim.cir"
    victim.write_text("keep me")
    job = load_job(DEMO / "job.toml")
    first = job.corners[0].name
    for link, target in (("loop_gain", outside), (f"decks/{first}.cir", victim)):
        out = tmp_path / f"out-{workers}-{link.split('/')[0]}"
        (out / link).parent.mkdir(parents=True, exist_ok=True)
        (out / link).symlink_to(target)
        with pytest.raises(OutputError, match="outside the out folder|symbolic links"):
            measure(job, out=out, workers=workers, time_domain=False)
        assert victim.read_text() == "keep me"
        assert sorted(p.name for p in outside.iterdir()) == ["victim.cir"]
