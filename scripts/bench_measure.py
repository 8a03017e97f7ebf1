"""Benchmarks of `amploop measure` on the demo job: overhead, parallel speed-up, memory.

Run:  .venv/bin/python scripts/bench_measure.py [--reps N] [--overhead-only]

1. Overhead: amploop's wall time per corner measurement (warm pool of one worker, the
   whole measure() call: testbenches, analyses, margins, CSVs, results.json, journal)
   divided by the same analyses run straight through PySpice's shared library on the
   decks it saved in the out folder (their .control block taken out), in this process:
   load_circuit, the testbench's own commands (for the single-ended demo 2 AC analyses
   and 2 alters, for the fully-differential demo 4 AC analyses and 9 alters; then the
   operating-point read-out's setplot), reading the AC vectors that amploop reads (3,
   and 7 for the FD demo), freeing. Medians over repetitions, same
   run. Run on the single-ended demo and on the FD demo (netlists/fd_demo).
   Target: <= 1.3.
2. Parallel: a 12-corner measurement with 2 workers vs 1 worker. Reported as (a) the
   measurement with the workers already started, (b) the whole `amploop measure`
   command as a user runs it (Python start-up, imports and worker start-up included),
   (c) the measurement confined to one core (taskset, 1 worker) vs both cores (2
   workers), and (d) as (a) with the out folder in memory (tmpfs), which takes the
   disk's share out. Beside (a): what ngspice alone (no amploop code) gained from two
   processes in the same reps, the time inside ngspice, and the worker pool alone on
   the same analyses.
   Loop-gain measurement only: the report's step checks and PDF are left out
   (`time_domain=False`, `--no-report`).
   Target: >= 1.7x.
   Run on the demo, on the 45 nm example, and on the 45 nm example with every
   transistor drawn as 16 fingers (the same circuit, with analyses about eight times
   as long, as a layout's netlist gives them).
3. Memory: peak RSS (coordinator + worker + fork server, summed over the process tree) of
   a 200-corner measurement with one worker vs a 2-corner one, each in a fresh process.
   Target: <= 1.5x.

The machine is noisy: quote ratios from one run and the analysis counts.
"""

from __future__ import annotations

import argparse
import os
import re
import shutil
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "netlists" / "demo" / "job.toml"
FD_DEMO = REPO / "netlists" / "fd_demo" / "job.toml"
#: Where the benchmarks put their jobs and out folders: inside the project, like the demo's
#: runs/demo (git-ignored), where a user's out folders would be. On the shared test
#: machine, creating a file costs from 20 us to over 1 ms of kernel time depending on the
#: folder and the minute (the same disk under /tmp, /work, ...); the output says what it
#: cost here while each figure was measured.
SCRATCH = REPO / "runs" / "bench"


def scratch(base: Path = SCRATCH) -> tempfile.TemporaryDirectory:
    """A temporary folder under ``base`` (created if missing), removed when done."""
    base.mkdir(parents=True, exist_ok=True)
    return tempfile.TemporaryDirectory(dir=base)


def file_creation_us(base: Path, files: int = 24, reps: int = 9) -> float:
    """Median microseconds to create and write one 20 kB file in a new folder under
    ``base``: what a corner's CSV or deck costs the file system there."""
    times = []
    for _ in range(reps):
        with scratch(base) as folder:
            start = time.perf_counter()
            for i in range(files):
                fd = os.open(os.path.join(folder, f"{i}.csv"),
                             os.O_WRONLY | os.O_CREAT | os.O_TRUNC, 0o644)
                os.write(fd, b"0" * 20_000)
                os.close(fd)
            times.append((time.perf_counter() - start) / files)
    return statistics.median(times) * 1e6


def job_with_corners(folder: Path, grid: str, job_file: Path = DEMO) -> Path:
    """A copy of a job (same netlist and models) with its corners replaced by a grid."""
    text = job_file.read_text()
    text = text[: text.index("[[corners]]")]
    for key in ("netlist", "models"):
        match = re.search(rf'^{key} = "([^"]+)"', text, re.MULTILINE)
        if match:
            absolute = (job_file.parent / match.group(1)).resolve()
            text = text.replace(match.group(0), f'{key} = "{absolute}"')
    path = folder / "job.toml"
    path.write_text(text + grid)
    return path


GRID_12 = '[corner_grid]\nlib = ["tt", "ss", "ff"]\ntemp = [-40, 125]\nparams = { vdd = [1.71, 1.89], cl = ["2p"] }\n'
GRID_2 = '[corner_grid]\nlib = ["tt"]\ntemp = [-40, 125]\nparams = { vdd = [1.8], cl = ["2p"] }\n'
GRID_200 = ('[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, 0, 27, 85, 125]\n'
            'params = { vdd = [1.71, 1.8, 1.89, 1.98], cl = ["1p", "1.5p", "2p", "2.5p", "3p"] }\n')


_RAW = {}


def ac_reads(steps) -> list[str]:
    """The vectors a testbench's steps read from its AC plots, as ``"ac<k>.<vector>"``
    (the k-th AC analysis of a deck makes plot ac<k>), frequency left out: the three of
    the single-ended testbench's two runs, the seven of the fully-differential one's four."""
    reads, k = [], 0
    for step in steps:
        if step.is_ac:
            k += 1
            reads += [f"ac{k}.{name}" for name in step.read if name != "frequency"]
    return reads


def raw_pyspice(decks: list[str], steps: list[str], reps: int, reads: list[str]) -> float:
    """Median seconds per deck for load, the testbench's own commands (its AC analyses and
    the alters between them) and reading ``reads``, through PySpice's NgSpiceShared."""
    import logging

    logging.getLogger("PySpice").setLevel(logging.CRITICAL)
    from PySpice.Spice.NgSpice.Shared import NgSpiceShared, ffi

    if not _RAW:
        os.chdir(tempfile.mkdtemp(prefix="amploop-bench-"))  # BSIM4 writes bsim4v5.out here
        _RAW["ngspice"] = NgSpiceShared.new_instance()
        _RAW["ngspice"]._ngspice_shared.ngSpice_Command(b"set num_threads=1")
    ngspice = _RAW["ngspice"]
    lib = ngspice._ngspice_shared
    times = []
    for _ in range(reps):
        for deck in decks:
            start = time.perf_counter()
            ngspice.load_circuit(deck)
            for command in steps:
                lib.ngSpice_Command(command.encode())
            for name in reads:
                info = lib.ngGet_Vec_Info(name.encode())
                if info == ffi.NULL:
                    raise SystemExit(f"bench: vector {name} not found after the deck's steps")
                bytes(ffi.buffer(info.v_compdata, info.v_length * 16))
            lib.ngSpice_Command(b"destroy all")
            lib.ngSpice_Command(b"remcirc")
            times.append(time.perf_counter() - start)
    return statistics.median(times)


def saved_deck(path: Path) -> str:
    """A deck amploop saved in the out folder, without the ``.control`` block that makes
    it runnable by hand (its commands are the ones sent through the library instead), its
    included files named by absolute path."""
    text = path.read_text()
    start, end = text.index(".control\n"), text.index(".endc\n") + len(".endc\n")
    # the files it includes are named relative to the decks folder: made absolute, as
    # raw_pyspice runs in a folder of its own
    text = text[:start] + text[end:]
    return re.sub(r'"(include/[^"]+)"', lambda m: f'"{path.parent / m.group(1)}"', text)


def overhead(reps: int, job_file: Path, grids: tuple[str, str]) -> None:
    """Per-corner cost: the slope between a small and a large job, so that the fixed cost
    of a run (reading files, opening the journal, results.json) is reported apart."""
    from amploop.bench.amplifier import prepare_amplifier
    from amploop.bench.testbench import build_testbench
    from amploop.corners.measure import measure
    from amploop.sim.pool import WorkerPool
    from amploop.spec.job import load_job

    times: dict[int, list[float]] = {}
    raw_times: list[float] = []
    creation: list[float] = []
    with WorkerPool(1) as pool, scratch() as tmp:
        jobs = {}
        for grid in grids:
            folder = Path(tmp) / str(len(jobs))
            folder.mkdir()
            jobs[grid] = load_job(job_with_corners(folder, grid, job_file))
        small_job = jobs[grids[0]]
        amplifier = prepare_amplifier(small_job)
        bench_steps = build_testbench(amplifier, small_job.corners[0], {}).steps
        steps, reads = [s.command for s in bench_steps], ac_reads(bench_steps)
        analyses = sum(s.is_ac for s in bench_steps)
        measure(small_job, out=Path(tmp) / "warm", pool=pool, time_domain=False)
        decks = [saved_deck(path) for path in sorted((Path(tmp) / "warm" / "decks").glob("*.cir"))]
        assert len(decks) == len(small_job.corners)
        raw_pyspice(decks, steps, 1, reads)  # warm
        for rep in range(reps):  # interleaved, so that the machine's drift hits all alike
            for job in jobs.values():
                start = time.perf_counter()
                measure(job, out=Path(tmp) / f"{len(job.corners)}-{rep}", pool=pool, time_domain=False)
                times.setdefault(len(job.corners), []).append(time.perf_counter() - start)
            raw_times.append(raw_pyspice(decks, steps, 1, reads))
            creation.append(file_creation_us(SCRATCH, reps=1))
    timings = {n: statistics.median(t) for n, t in times.items()}
    raw = statistics.median(raw_times)
    (n1, t1), (n2, t2) = sorted(timings.items())
    per_corner = (t2 - t1) / (n2 - n1)
    fixed = t1 - n1 * per_corner
    print(f"overhead ({job_file.parent.name}): {n1} and {n2} corners x {reps} reps, "
          f"{analyses} AC analyses per corner ({len(steps)} commands, {len(reads)} vectors read)")
    print(f"  amploop measure, per corner (slope of medians): {per_corner * 1e3:7.2f} ms"
          f"   (+ {fixed * 1e3:.0f} ms per run: files, journal, results.json)")
    print(f"  PySpice straight, per deck  (median):           {raw * 1e3:7.2f} ms")
    print(f"  ratio: {per_corner / raw:.2f}   (target <= 1.3)")
    print(f"  meanwhile, creating one of a corner's files took {statistics.median(creation):.0f} us"
          f" in the out folders' place (median of the same reps; {min(creation):.0f} to "
          f"{max(creation):.0f} us)")


def parallel(reps: int, job_file: Path, grid: str) -> None:
    from amploop.bench.amplifier import prepare_amplifier
    from amploop.bench.testbench import build_testbench
    from amploop.corners.measure import measure
    from amploop.sim.pool import WorkerPool
    from amploop.spec.job import load_job

    with scratch() as tmp:
        job_path = job_with_corners(Path(tmp), grid, job_file)
        job = load_job(job_path)
        warm: dict[int, list[float]] = {1: [], 2: []}
        inside: dict[int, list[float]] = {1: [], 2: []}
        ceiling = []
        creation: list[float] = []
        alone: dict[int, list[float]] = {1: [], 2: []}
        amplifier = prepare_amplifier(job)
        requests = [(c.name, build_testbench(amplifier, c, {}).request(60.0)) for c in job.corners]
        steps = [step.command for step in requests[0][1].steps]
        reads = ac_reads(requests[0][1].steps)
        with WorkerPool(1) as one, WorkerPool(2) as two:
            pools = {1: one, 2: two}
            for workers, pool in pools.items():
                measure(job, out=Path(tmp) / f"warm{workers}", pool=pool, time_domain=False)
            decks = [saved_deck(path) for path in
                     sorted((Path(tmp) / "warm1" / "decks").glob("*.cir"))]
            with _NgspiceAlone(decks, steps, reads) as alone_ngspice:
                for rep in range(reps):  # interleaved: the machine's drift hits all alike
                    for workers, pool in pools.items():
                        start = time.perf_counter()
                        result = measure(job, out=Path(tmp) / f"w{workers}r{rep}", pool=pool,
                                         time_domain=False)
                        warm[workers].append(time.perf_counter() - start)
                        inside[workers].append(result.simulator_seconds)
                        start = time.perf_counter()
                        list(pool.run(requests))
                        alone[workers].append(time.perf_counter() - start)
                    ceiling.append(alone_ngspice.speed_up())
                    creation.append(file_creation_us(SCRATCH, reps=1))
        cold: dict[int, list[float]] = {1: [], 2: []}
        for rep in range(reps):
            for workers in (1, 2):
                start = time.perf_counter()
                subprocess.run([sys.executable, "-m", "amploop.cli", "measure", str(job_path),
                                "--out", str(Path(tmp) / f"c{workers}r{rep}"), "--workers",
                                str(workers), "--quiet", "--no-report"], check=True)
                cold[workers].append(time.perf_counter() - start)
    w1, w2 = statistics.median(warm[1]), statistics.median(warm[2])
    c1, c2 = statistics.median(cold[1]), statistics.median(cold[2])
    sim = statistics.median(inside[1])
    print(f"parallel ({job_file.parent.name}): {len(job.corners)} corners, "
          f"{result.ac_run} AC analyses per measurement, {reps} interleaved reps")
    print(f"  (a) workers started: 1 worker {w1 * 1e3:.0f} ms, 2 workers {w2 * 1e3:.0f} ms,"
          f" speed-up {w1 / w2:.2f}x   (target >= 1.7)")
    print(f"      the ceiling meanwhile: ngspice alone (the saved decks straight through PySpice, "
          f"no amploop code) did {statistics.median(ceiling):.2f}x the analyses per second in "
          f"2 processes as in 1 (median of the same reps; range {min(ceiling):.2f} to "
          f"{max(ceiling):.2f})")
    print(f"      time inside ngspice per measurement: {sim * 1e3:.0f} ms with 1 worker, "
          f"{statistics.median(inside[2]) * 1e3:.0f} ms summed over 2")
    print(f"      creating one of a corner's files in the out folders' place meanwhile: "
          f"{statistics.median(creation):.0f} us (median; {min(creation):.0f} to "
          f"{max(creation):.0f} us)")
    a1, a2 = statistics.median(alone[1]), statistics.median(alone[2])
    print(f"      the worker pool alone, the same {len(requests)} analyses without the "
          f"per-corner work: 1 worker {a1 * 1e3:.0f} ms, 2 workers {a2 * 1e3:.0f} ms, "
          f"speed-up {a1 / a2:.2f}x")
    print(f"  (b) whole command:   1 worker {c1 * 1e3:.0f} ms, 2 workers {c2 * 1e3:.0f} ms,"
          f" speed-up {c1 / c2:.2f}x")
    if shutil.which("taskset") and len(os.sched_getaffinity(0)) >= 2:
        one_core, two_cores = [], []
        with scratch() as tmp:
            job_path = job_with_corners(Path(tmp), grid, job_file)
            for rep in range(3):  # alternated; each child reports its own median
                one_core.append(_warm_child(["taskset", "-c", "0"], job_path, 1, reps, tmp))
                two_cores.append(_warm_child([], job_path, 2, reps, tmp))
        o, t = statistics.median(one_core), statistics.median(two_cores)
        print(f"  (c) one core vs two: the measurement confined to one core (taskset, 1 worker) "
              f"{o * 1e3:.0f} ms, on both cores (2 workers) {t * 1e3:.0f} ms, speed-up {o / t:.2f}x")
    memory_fs = Path("/dev/shm")
    if memory_fs.is_dir() and os.access(memory_fs, os.W_OK):
        one_worker, two_workers = [], []
        with scratch(memory_fs) as tmp:
            job_path = job_with_corners(Path(tmp), grid, job_file)
            for rep in range(3):  # alternated; each child reports its own median
                one_worker.append(_warm_child([], job_path, 1, reps, tmp))
                two_workers.append(_warm_child([], job_path, 2, reps, tmp))
        o, t = statistics.median(one_worker), statistics.median(two_workers)
        print(f"  (d) out folder in memory (tmpfs, /dev/shm), otherwise as (a): 1 worker "
              f"{o * 1e3:.0f} ms, 2 workers {t * 1e3:.0f} ms, speed-up {o / t:.2f}x")


def _warm_child(prefix: list[str], job_path: Path, workers: int, reps: int, tmp: str) -> float:
    """Median warm measurement time in a child process (which may be pinned to a core)."""
    out = subprocess.run([*prefix, sys.executable, __file__, "--child", str(job_path),
                          str(workers), str(reps), tmp], check=True, capture_output=True,
                         text=True).stdout
    return float(out.split()[-1])


def child(job_path: str, workers: int, reps: int, tmp: str) -> None:
    """``--child``: warm measurements of a job in this process; prints the median, s."""
    from amploop.corners.measure import measure
    from amploop.sim.pool import WorkerPool
    from amploop.spec.job import load_job

    job = load_job(job_path)
    times = []
    with WorkerPool(workers) as pool, tempfile.TemporaryDirectory(dir=tmp) as folder:
        measure(job, out=Path(folder) / "warm", pool=pool, time_domain=False)
        for rep in range(reps):
            start = time.perf_counter()
            measure(job, out=Path(folder) / str(rep), pool=pool, time_domain=False)
            times.append(time.perf_counter() - start)
    print(statistics.median(times))


def _raw_total(decks: list[str], steps: list[str], reads: list[str]) -> float:
    """Seconds to run every deck once straight through PySpice (in a ceiling process)."""
    start = time.perf_counter()
    raw_pyspice(decks, steps, 1, reads)
    return time.perf_counter() - start


class _NgspiceAlone:
    """What this machine gives two ngspice processes at the moment, with no amploop code:
    the same analyses (the saved decks, straight through PySpice) run twice in one process
    vs once in each of two processes at the same time. On a shared virtual machine this
    moves from run to run; it is the ceiling for any speed-up of two workers at that time.
    """

    def __init__(self, decks: list[str], steps: list[str], reads: list[str]) -> None:
        self.decks, self.steps, self.reads = decks, steps, reads

    def __enter__(self):
        import multiprocessing as mp

        self._pool = mp.get_context("forkserver").Pool(2)
        for _ in range(3):  # start ngspice in both
            self._pool.starmap(_raw_total, [(self.decks[:1], self.steps, self.reads)] * 2, chunksize=1)
        return self

    def __exit__(self, *exc) -> None:
        self._pool.terminate()

    def speed_up(self) -> float:
        serial = self._pool.apply(_raw_total, (self.decks * 2, self.steps, self.reads))
        start = time.perf_counter()
        self._pool.starmap(_raw_total, [(self.decks, self.steps, self.reads)] * 2, chunksize=1)
        return serial / (time.perf_counter() - start)


def _tree_peak_kb(root_pid: int, stop: threading.Event, peaks: dict[int, int]) -> None:
    """Poll VmHWM (peak RSS) of every process in the tree under ``root_pid``."""
    while not stop.is_set():
        pids = [root_pid]
        i = 0
        while i < len(pids):
            try:
                children = Path(f"/proc/{pids[i]}/task/{pids[i]}/children").read_text().split()
            except OSError:
                children = []
            pids.extend(int(c) for c in children)
            i += 1
        for pid in pids:
            try:
                status = Path(f"/proc/{pid}/status").read_text()
            except OSError:
                continue
            match = re.search(r"VmHWM:\s+(\d+) kB", status)
            if match:
                peaks[pid] = max(peaks.get(pid, 0), int(match.group(1)))
        time.sleep(0.01)


def run_watched(command: list[str]) -> tuple[str, dict[int, int]]:
    """Run ``command``; its stdout and the peak RSS, kB, of every process in its tree."""
    process = subprocess.Popen(command, stdout=subprocess.PIPE, text=True)
    stop, peaks = threading.Event(), {}
    watcher = threading.Thread(target=_tree_peak_kb, args=(process.pid, stop, peaks))
    watcher.start()
    out, _ = process.communicate()
    stop.set()
    watcher.join()
    if process.returncode != 0:
        raise SystemExit(f"{command[0]} exited with {process.returncode}")
    return out, peaks


def memory() -> None:
    results = {}
    with scratch() as tmp:
        for label, grid in (("2", GRID_2), ("200", GRID_200)):
            folder = Path(tmp) / label
            folder.mkdir()
            job_path = job_with_corners(folder, grid)
            code = ("import sys\nfrom amploop.spec.job import load_job\nfrom amploop.corners.measure import measure\n"
                    "if __name__ == '__main__':\n"
                    f"    r = measure(load_job({str(job_path)!r}), out={str(folder / 'out')!r}, workers=1, time_domain=False)\n"
                    "    print(len(r.corners), r.ac_run)\n"
                    "    import time; time.sleep(0.3)\n")
            script = folder / "run.py"
            script.write_text(code)
            out, peaks = run_watched([sys.executable, str(script)])
            corners, analyses = out.split()
            results[label] = (sum(peaks.values()), int(corners), int(analyses), len(peaks))
    (small, c2, a2, n2), (large, c200, a200, n200) = results["2"], results["200"]
    print("memory: peak RSS summed over the process tree (coordinator, fork server, worker)")
    print(f"  {c2:3d} corners ({a2:3d} AC analyses): {small / 1024:6.1f} MiB in {n2} processes")
    print(f"  {c200:3d} corners ({a200:3d} AC analyses): {large / 1024:6.1f} MiB in {n200} processes")
    print(f"  ratio: {large / small:.2f}   (target <= 1.5)")


PTM45 = REPO / "netlists" / "ptm45" / "job.toml"
GRID_PTM_20 = '[corner_grid]\ntemp = [-40, 27, 125, 85]\nparams = { vdd = [1.0, 1.1, 1.2, 1.05, 1.15], cl = ["1p"] }\n'
GRID_PTM_12 = '[corner_grid]\ntemp = [-40, 27, 125]\nparams = { vdd = [1.0, 1.1, 1.2, 1.05], cl = ["1p"] }\n'
GRID_PTM_100 = ('[corner_grid]\ntemp = [-40, 0, 27, 85, 125]\n'
                'params = { vdd = [1.0, 1.05, 1.1, 1.15, 1.2], cl = ["0.5p", "1p", "1.5p", "2p"] }\n')
GRID_20 = '[corner_grid]\nlib = ["tt", "ss"]\ntemp = [-40, 27, 125, 85, 0]\nparams = { vdd = [1.71, 1.89], cl = ["2p"] }\n'


def fingered_job(folder: Path, fingers: int) -> Path:
    """The 45 nm example with every transistor drawn as ``fingers`` parallel devices of
    1/``fingers`` the width (areas and perimeters scaled alike; the first keeps the
    device's name), as a layout's netlist lists them: the same circuit, with analyses
    that cost what a netlist of eight times sixteen BSIM4 instances does. Invented
    benchmark data, made here; written into ``folder`` with a copy of the job."""
    from amploop.spice.units import parse_value, spice_number

    source = PTM45.parent / "two_stage_45.cir"
    lines = []
    for line in source.read_text().splitlines():
        words = line.split()
        if not words or words[0][0].lower() != "m":
            lines.append(line)
            continue
        for k in range(fingers):
            name = words[0] if k == 0 else f"{words[0]}f{k + 1}"
            scaled = []
            for word in words[6:]:
                key, _, value = word.partition("=")
                if key.lower() in ("w", "ad", "as", "pd", "ps"):
                    word = f"{key}={spice_number(parse_value(value) / fingers)}"
                scaled.append(word)
            lines.append(" ".join([name, *words[1:6], *scaled]))
    folder.mkdir(parents=True, exist_ok=True)
    (folder / source.name).write_text("\n".join(lines) + "\n")
    text = PTM45.read_text()
    match = re.search(r'^models = "([^"]+)"', text, re.MULTILINE)
    models = (PTM45.parent / match.group(1)).resolve()
    job = folder / "job.toml"
    job.write_text(text.replace(match.group(0), f'models = "{models}"'))
    return job


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=7)
    parser.add_argument("--overhead-only", action="store_true",
                        help="only the overhead lines of the two demos (single-ended, FD)")
    parser.add_argument("--child", nargs=4, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        job_path, workers, reps, tmp = args.child
        child(job_path, int(workers), int(reps), tmp)
        return
    print(f"machine: {os.cpu_count()} CPUs; python {sys.version.split()[0]}")
    print(f"file system: creating a 20 kB file takes {file_creation_us(SCRATCH):.0f} us in "
          f"{SCRATCH.relative_to(REPO)} (the out folders here), "
          f"{file_creation_us(Path(tempfile.gettempdir())):.0f} us in {tempfile.gettempdir()}")
    overhead(args.reps, DEMO, (GRID_20, GRID_200))
    overhead(args.reps, FD_DEMO, (GRID_20, GRID_200))
    if args.overhead_only:
        return
    parallel(args.reps, DEMO, GRID_12)
    ptm = PTM45.is_file()
    if ptm:  # BSIM4 cards: analyses that cost what real ones do
        overhead(args.reps, PTM45, (GRID_PTM_20, GRID_PTM_100))
        parallel(args.reps, PTM45, GRID_PTM_12)
        with scratch() as tmp:  # the same circuit, as a layout's netlist lists its devices
            parallel(args.reps, fingered_job(Path(tmp) / "ptm45-16-fingers", 16), GRID_PTM_12)
    else:
        print("(the 45 nm BSIM4 runs need netlists/ptm45: skipped)")
    memory()


if __name__ == "__main__":
    main()
