"""Benchmark of `amploop tune` on an extracted-size netlist: ngspice seconds per corner.

Run:  .venv/bin/python scripts/bench_layout.py [--sizes 1000 10000] [--corners 2]
                                               [--reps 1] [--baseline /path/to/old/checkout]
                                               [--return-net vss]

INVENTED BENCHMARK DATA. The netlist is the demo amplifier (netlists/demo, itself
invented) with a synthetic "extracted" wiring added: each of six nets (n1, n2, tail, out,
ibias and nz, the node between Rc and Cc) carries a dangling RC wire of N segments of
2 ohm and 0.02 fF to vss (``--return-net vdd``: to vdd instead, a supply that is not
tied to ground). It is no layout's data; it only gives ngspice the size of one.

1. For each N: `tune` (map strategy, one worker, no step check, no report) on the first
   few corners of the demo job, today's way (the code at --baseline, run in its own
   process) and the new way (this checkout), in one run. Printed: ngspice CPU seconds per
   corner (the worker process's CPU time during the run, from /proc; the new way also
   records process_time around each analysis),
   the ratio, AC analyses per corner, the map's form, and the largest margin difference
   over the corners (PM in degrees, UGF relative).
2. The netlist reader on a 120,000-line extracted file (N = 10,000 gives that size):
   parse time, render time per deck, and the peak memory of the process.
The machine is shared: the load average is printed beside every figure.
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DEMO = REPO / "netlists" / "demo"
#: The nets that get a wire; nz is the node between Rc and Cc.
NETS = ("n1", "n2", "tail", "out", "ibias", "nz")


def wiring(segments: int, nets=NETS, return_net: str = "vss") -> str:
    """Invented extracted wiring: an RC ladder of ``segments`` 2 Ω / 0.02 fF sections
    hanging off each of ``nets`` (capacitors to ``return_net``), as netlist lines."""
    title = ("* INVENTED BENCHMARK DATA: synthetic extracted wiring "
             f"({segments} RC segments on each of {', '.join(nets)})")
    lines = [title]
    for net in nets:
        previous = net
        for k in range(1, segments + 1):
            node = f"w_{net}_{k}"
            lines.append(f"Rw_{net}_{k} {previous} {node} 2")
            lines.append(f"Cw_{net}_{k} {node} {return_net} 0.02f")
            previous = node
    return "\n".join(lines) + "\n"


def extracted_job(folder: Path, segments: int, corners: int, nets=NETS,
                  return_net: str = "vss") -> Path:
    """Write the demo job with the wired netlist into ``folder`` (its first ``corners``
    corners only, the wire capacitors to ``return_net``); the job file's path."""
    folder.mkdir(parents=True, exist_ok=True)
    text = (DEMO / "two_stage.cir").read_text()
    text = text.replace(".ends two_stage", wiring(segments, nets, return_net) + ".ends two_stage")
    (folder / "two_stage.cir").write_text(text)
    job = (DEMO / "job.toml").read_text()
    job = job.replace('models = "models.lib"', f'models = "{DEMO / "models.lib"}"')
    head, *blocks = job.split("[[corners]]")
    job = head + "".join("[[corners]]" + b for b in blocks[:corners])
    (folder / "job.toml").write_text(job)
    return folder / "job.toml"


# run in a child process, with PYTHONPATH naming the checkout to measure
_CHILD = r"""
import json, os, sys, time
from pathlib import Path
from amploop.sim.pool import WorkerPool
from amploop.spec.job import load_job
from amploop.strategy.tune import tune

def workers_cpu(pool):
    total = 0.0
    for worker in pool._workers:
        fields = Path(f"/proc/{worker.process.pid}/stat").read_text().rsplit(")", 1)[1].split()
        total += (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")
    return total

job = load_job(sys.argv[1])
with WorkerPool(1) as pool:
    idle = workers_cpu(pool)
    start = time.perf_counter()
    result = tune(job, out=Path(sys.argv[2]), pool=pool, time_domain=False)
    wall = time.perf_counter() - start
    cpu = workers_cpu(pool) - idle
print(json.dumps({
    "status": result.status, "values": result.outcome.values, "wall": wall,
    "ngspice_wall": result.simulator_seconds,
    "ngspice_cpu": getattr(result, "simulator_cpu_seconds", None),
    "workers_cpu": cpu,
    "ac": result.ac_run + result.ac_reused, "rounds": result.outcome.extra.get("rounds"),
    "form": result.outcome.extra.get("map_form"),
    "corners": [[c.corner.name, c.margins.phase_margin_deg, c.margins.unity_gain_hz]
                for c in result.corners],
}))
"""


def load() -> str:
    """The load averages, for the record beside each figure."""
    return "load " + " ".join(f"{x:.2f}" for x in os.getloadavg())


def run_tune(checkout: Path, job: Path, out: Path) -> dict:
    """`tune` of ``job`` by the code at ``checkout`` in a fresh process; its figures."""
    env = {**os.environ, "PYTHONPATH": str(checkout)}
    done = subprocess.run([sys.executable, "-c", _CHILD, str(job), str(out)], env=env,
                          capture_output=True, text=True, check=False, cwd=checkout)
    if done.returncode != 0:
        raise SystemExit(f"bench: tune failed at {checkout}:\n{done.stderr[-2000:]}")
    return json.loads(done.stdout.strip().splitlines()[-1])


def compare(old: dict, new: dict) -> tuple[float, float]:
    """Largest |ΔPM| (degrees) and |ΔUGF|/UGF over the corners of two runs."""
    pm = max(abs(a[1] - b[1]) for a, b in zip(old["corners"], new["corners"]))
    ugf = max(abs(a[2] / b[2] - 1) for a, b in zip(old["corners"], new["corners"]))
    return pm, ugf


def reader(folder: Path) -> None:
    """Parse and render the 120,000-line netlist: seconds, and the peak memory."""
    from amploop.bench.amplifier import prepare_amplifier
    from amploop.bench.testbench import build_testbench
    from amploop.spec.job import load_job

    job_file = extracted_job(folder / "reader", 10_000, 2)
    lines = len((folder / "reader" / "two_stage.cir").read_text().splitlines())
    start = time.process_time()
    job = load_job(job_file)
    amplifier = prepare_amplifier(job)
    parsed = time.process_time() - start
    start = time.process_time()
    for corner in job.corners:
        build_testbench(amplifier, corner, {"cc": 1e-12, "rc": 1000.0})
    render = (time.process_time() - start) / len(job.corners)
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"reader: {lines} lines: parse {parsed:.2f} s CPU, render {render:.3f} s CPU per "
          f"deck, peak memory of this process {peak:.0f} MB ({load()})")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[1000, 10000])
    parser.add_argument("--corners", type=int, default=2)
    parser.add_argument("--reps", type=int, default=1, help="alternating repetitions")
    parser.add_argument("--return-net", default="vss", choices=["vss", "vdd"],
                        help="where the wire capacitors return (vss: tied to ground)")
    parser.add_argument("--baseline", type=Path, default=None,
                        help="checkout of today's code (default: skip the old way)")
    args = parser.parse_args()
    with tempfile.TemporaryDirectory(prefix="amploop-layout-") as tmp:
        folder = Path(tmp)
        reader(folder)
        print(f"wire capacitors return to {args.return_net}", flush=True)
        for size in args.sizes:
            job = extracted_job(folder / f"n{size}", size, args.corners,
                                return_net=args.return_net)
            ways = {"new": REPO} | ({"today": args.baseline} if args.baseline else {})
            runs: dict[str, list[dict]] = {name: [] for name in ways}
            for rep in range(args.reps):  # alternating, so that the load hits both alike
                for name, checkout in ways.items():
                    r = run_tune(checkout, job, folder / f"out-{name}-{size}-{rep}")
                    runs[name].append(r)
                    inside = "" if r["ngspice_cpu"] is None else \
                        f", inside analyses {r['ngspice_cpu'] / args.corners:.2f} s"
                    print(f"N={size} {name:>5}: {r['status']}, worker CPU "
                          f"{r['workers_cpu'] / args.corners:.2f} s per corner{inside} (ngspice "
                          f"wall {r['ngspice_wall'] / args.corners:.2f} s), "
                          f"{r['ac'] / args.corners:.0f} AC per corner, rounds {r['rounds']}, "
                          f"form {r['form']}, tune wall {r['wall']:.1f} s ({load()})", flush=True)
            if "today" in runs:
                old, new = runs["today"][-1], runs["new"][-1]
                pm, ugf = compare(old, new)
                cpu = {k: statistics.median(r["workers_cpu"] for r in v) for k, v in runs.items()}
                wall = {k: statistics.median(r["wall"] for r in v) for k, v in runs.items()}
                print(f"N={size}: worker CPU new/today {cpu['new'] / cpu['today']:.2f}, tune wall "
                      f"{wall['new'] / wall['today']:.2f} (medians of {args.reps}); largest "
                      f"margin difference {pm:.4f}° PM, {ugf:.2e} UGF; values today "
                      f"{old['values']}, new {new['values']}", flush=True)

if __name__ == "__main__":
    main()
