"""The ``amploop`` command line: a thin layer over the Python functions.

This is the only module that maps errors to exit codes and prints them.
"""

from __future__ import annotations

import argparse
import json
import sys
from enum import IntEnum
from importlib.metadata import version

from amploop.cli.progress import corner_progress, page_progress, tune_progress
from amploop.cli.terminal import (
    corner_table,
    print_corner_errors,
    print_corner_remarks,
    values_line,
)
from amploop.errors import (
    AmploopError,
    JobError,
    JournalError,
    MeasurementError,
    NetlistError,
    OutputError,
    SimulatorError,
    TuningError,
)
from amploop.spice.units import engineering

__all__ = ["ExitCode", "main"]


class ExitCode(IntEnum):
    """Exit codes of the ``amploop`` command.

    ``OK`` (0) every corner measured, or the target met; ``SIMULATOR_FAILURE`` (1) a
    corner could not be simulated or measured, is suspect, or tuning failed;
    ``BAD_INPUT`` (2) the job file, the netlist or the command line is wrong (also
    ``measure`` when ngspice refused the deck of every corner that failed); ``INFEASIBLE`` (3) no compensation
    within the bounds meets the target; ``RESOURCE`` (4) the out folder cannot be used:
    not writable, the disk full, held by another run, or its journal locked, damaged or
    of another version (:class:`~amploop.errors.OutputError`,
    :class:`~amploop.errors.JournalError`); ``INTERNAL`` (70) an unexpected Python
    exception, a bug in amploop (``--debug`` shows its traceback); ``INTERRUPTED`` (130)
    Ctrl-C.
    """

    OK = 0
    SIMULATOR_FAILURE = 1  # a corner could not be simulated or measured
    BAD_INPUT = 2  # the job file, the netlist or the command line is wrong
    INFEASIBLE = 3  # no compensation within the bounds meets the target
    RESOURCE = 4  # the out folder cannot be used (permissions, disk full, lock, journal)
    INTERNAL = 70  # an unexpected exception: a bug (EX_SOFTWARE of sysexits.h)
    INTERRUPTED = 130


def _exit_code(error: AmploopError) -> ExitCode:
    if isinstance(error, (JobError, NetlistError, TuningError)):
        return ExitCode.BAD_INPUT
    if isinstance(error, (SimulatorError, MeasurementError)):
        return ExitCode.SIMULATOR_FAILURE
    if isinstance(error, (OutputError, JournalError)):
        return ExitCode.RESOURCE
    return ExitCode.SIMULATOR_FAILURE


_DEBUG_HELP = ("show the traceback of an internal error (as the environment variable "
               "AMPLOOP_DEBUG=1 does)")


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="amploop",
        description="Measure the loop gain of a two-stage amplifier in its feedback loop at "
        "every corner, and tune its Miller compensation.",
        epilog="Results are only as good as the device models; sign-off stays with your own "
        "models, flow and foundry rules.",
    )
    parser.add_argument("--version", action="version", version=f"amploop {version('amploop')}")
    parser.add_argument("--debug", action="store_true", help=_DEBUG_HELP)
    commands = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    # also after the command; SUPPRESS keeps a --debug given before it
    debug = argparse.ArgumentParser(add_help=False)
    debug.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                       help=_DEBUG_HELP)

    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("job", help="the job file (TOML)")
    common.add_argument("--out", required=True, metavar="DIR", help="out folder")
    common.add_argument("--workers", type=int, default=None, metavar="N",
                        help="worker processes (default: the CPU count)")
    common.add_argument("--cluster", default=None, metavar="ADDRESS",
                        help="run the analyses on the workers of a Dask cluster, given by its "
                        "scheduler's address (e.g. tcp://scheduler-host:8786)")
    common.add_argument("--allow-control", action="store_true",
                        help="run .control blocks found in your netlist (they can run commands)")
    common.add_argument("--quiet", action="store_true", help="print only errors")
    common.add_argument("--json", action="store_true",
                        help="print one JSON summary line instead of the table")
    common.add_argument("--no-report", action="store_true",
                        help="skip report.pdf and the step checks it shows")
    pages = argparse.ArgumentParser(add_help=False)
    pages.add_argument("--all-corner-pages", action="store_true",
                       help="a report page for every corner (by default a long corner list "
                       "gets an overview page and pages for the worst few only)")
    pages.add_argument("--corner-page", action="append", default=[], metavar="CORNER",
                       help="also give this corner a report page (repeatable)")

    measure = commands.add_parser(
        "measure", parents=[common, pages, debug], help="measure loop gain and margins",
        description="Measure the loop gain and its margins at every corner.")
    measure.add_argument("--set", action="append", default=[], metavar="ROLE=VALUE",
                         help="set a compensation value by its role, e.g. --set cc=1.5p")
    tune = commands.add_parser(
        "tune", parents=[common, pages, debug], help="choose Cc and Rc for the target margin",
        description="Choose Cc and Rc so that the worst corner meets the target phase margin "
        "with the least bandwidth given away.")
    tune.add_argument("--strategy", default="map", choices=["map", "textbook"],
                      help="map (default): exact compensation map; textbook: the two-step "
                      "hand procedure")
    tune.add_argument("--resume", action="store_true",
                      help="continue an interrupted run in the same out folder")
    report = commands.add_parser(
        "report", parents=[pages, debug],
        help="rebuild report.pdf of an out folder (no simulation)",
        description="Draw report.pdf and its PNG pages from an out folder's results.json and "
        "journal, without simulating.")
    report.add_argument("out", metavar="OUTDIR", help="an out folder of measure or tune")
    report.add_argument("--no-png", action="store_true", help="write the PDF only")
    explore = commands.add_parser(
        "explore", parents=[debug],
        help="rebuild explore.html of an out folder: margins at any Cc, Rc (no simulation)",
        description="Write explore.html, a page that predicts every corner's loop gain and "
        "margins at any Cc and Rc from the compensation maps of a tune with the map "
        "strategy, from the out folder's results.json and journal.")
    explore.add_argument("out", metavar="OUTDIR", help="an out folder of tune --strategy map")
    return parser


def _write_report(out, args, *, quiet: bool, pngs: bool = True) -> None:
    from amploop.report import build_report

    with page_progress(quiet) as progress:
        outcome = build_report(out, pngs=pngs, corner_pages=args.corner_page,
                               all_corner_pages=args.all_corner_pages, progress=progress)
    if not quiet:
        print(f"report: {outcome.pdf} ({outcome.pages} pages, {outcome.seconds:.1f} s)")


def _write_explore(out, *, quiet: bool, strict: bool) -> None:
    """Write explore.html; after a tune (``strict`` False) a folder the page cannot show
    gets a warning, not a failure."""
    from amploop.report.explore import build_explore, remove_explore

    try:
        outcome = build_explore(out)
    except JobError as error:
        if strict:
            raise
        remove_explore(out)
        if not quiet:
            print(f"amploop: warning: no explore.html: {error}", file=sys.stderr)
        return
    if not quiet:
        print(f"what-if page: {outcome.path} ({outcome.corners} corners, "
              f"{outcome.size_bytes / 1e6:.1f} MB)")


def _run_report(args) -> ExitCode:
    from amploop.corners.outputs import is_folder

    if not is_folder(args.out):
        raise JobError("not a folder", file=args.out)
    _write_report(args.out, args, quiet=False, pngs=not args.no_png)
    return ExitCode.OK


def _cluster_pool(args):
    """A ClusterPool for ``--cluster`` (a context manager), else one that gives None."""
    if args.cluster is None:
        from contextlib import nullcontext

        return nullcontext(None)
    from amploop.sim.cluster import ClusterPool

    return ClusterPool(args.cluster)


def _run_measure(args) -> ExitCode:
    from amploop.corners.measure import measure
    from amploop.spec.job import load_job
    from amploop.spec.overrides import parse_overrides

    job = load_job(args.job)
    overrides = parse_overrides(args.set, job)

    def finish(result) -> None:
        """Print the results and draw the report while the out folder is still held."""
        if progress is not None:
            progress.close()
        failed = [c for c in result.corners if c.status == "error"]
        suspect = [c for c in result.corners if c.status == "suspect"]
        if args.json:
            print(json.dumps(_measure_summary(result, failed, suspect)))
        elif not args.quiet:
            values = values_line(job, result.values)
            print(f"job {job.name}: {len(result.corners)} corners at {values}")
            print(corner_table(result.corners))
            print(f"{result.ac_run} AC analyses run, {result.ac_reused} reused, in "
                  f"{result.seconds:.1f} s; results in {result.out}")
        if not args.quiet:
            for warning in result.warnings:
                print(f"amploop: warning: {warning}", file=sys.stderr)
            print_corner_remarks(result.corners)
        print_corner_errors(failed, len(result.corners))
        if not args.no_report and any(c.margins is not None for c in result.corners):
            _write_report(result.out, args, quiet=args.quiet or args.json)
        from amploop.report.explore import remove_explore

        remove_explore(result.out)  # a measure leaves no maps: an earlier tune's page goes

    with _cluster_pool(args) as pool, corner_progress(args.quiet) as progress:
        result = measure(job, out=args.out, overrides=overrides, workers=args.workers,
                         pool=pool, allow_control=args.allow_control, progress=progress,
                         time_domain=not args.no_report, finish=finish)
    failed = [c for c in result.corners if c.status == "error"]
    suspect = [c for c in result.corners if c.status == "suspect"]
    if failed:
        if all(c.error_kind == "parse" for c in failed):
            return ExitCode.BAD_INPUT
        return ExitCode.SIMULATOR_FAILURE
    return ExitCode.SIMULATOR_FAILURE if suspect else ExitCode.OK


def _measure_summary(result, failed: list, suspect: list) -> dict:
    """The one line ``measure --json`` prints: the run, each corner's margins (as in
    results.json), and the ``worst`` block of results.json, which names the limiting
    corner (null unless every corner is ok)."""
    from amploop.strategy.worst import worst_case

    summary = result.as_json()
    worst = worst_case(result.corners)
    figures = ("name", "status", "dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg",
               "gain_margin_db", "phase_crossover_hz")
    return {k: summary[k] for k in ("job", "status", "values", "ac_analyses")} | {
        "corners": [{k: c[k] for k in figures} for c in summary["corners"]],
        "worst": worst and worst.as_json(),
        "failed_corners": [c.corner.name for c in failed],
        "suspect_corners": [c.corner.name for c in suspect],
        "out": str(result.out)}


def _run_tune(args) -> ExitCode:
    from amploop.spec.job import load_job
    from amploop.strategy.tune import tune

    job = load_job(args.job)

    def finish(result) -> None:
        """Print the results and draw the report while the out folder is still held."""
        if progress is not None:
            progress.close()  # its last line stays
        data = result.as_json()
        if args.json:
            print(json.dumps({k: data[k] for k in ("job", "strategy", "status", "values",
                                                   "worst", "ac_analyses")}
                             | {"message": result.outcome.message, "out": str(result.out)}))
        elif not args.quiet:
            values = values_line(job, result.outcome.values)
            print(f"job {job.name}: {result.status} ({args.strategy}) at {values}")
            print(corner_table(result.corners, job.target))
            print(result.outcome.message)
            print(f"{result.ac_run} AC analyses run, {result.ac_reused} reused, "
                  f"{len(result.history)} points in {result.seconds:.1f} s; results in "
                  f"{result.out}")
            if data["compensated_netlist"] and data["compensated_netlist"]["path"]:
                print(f"compensated netlist: {data['compensated_netlist']['path']}")
            elif result.status != "converged":
                print(f"no compensated netlist written: the run is {result.status}")
        if not args.no_report and result.outcome.final is not None:
            _write_report(result.out, args, quiet=args.quiet or args.json)
        # a tune characterised at its ports has the page's sampled maps only with the report
        sampled = not args.no_report or data.get("map_method") != "ports"
        if args.strategy == "map" and result.outcome.final is not None and sampled:
            _write_explore(result.out, quiet=args.quiet or args.json, strict=False)
        else:  # no maps: a page of an earlier run's would look current
            from amploop.report.explore import remove_explore

            remove_explore(result.out)
        if not args.quiet:
            for warning in data.get("warnings", []):
                print(f"amploop: warning: {warning}", file=sys.stderr)
            print_corner_remarks(result.corners)
            device = data.get("device")
            if device and not args.json:
                print(f"{device['name']} at {device['size']} = "
                      f"{engineering(device['value'], 'm', 4)}: resistance per corner "
                      "(simulator / square law / wanted by that corner alone)")
                for info in device["corners"]:
                    print(f"  {info['name']:<20} {engineering(info['resistance_ohm'], 'Ω', 4):>10}  "
                          f"{engineering(info['square_law_ohm'], 'Ω', 4):>10}  "
                          f"{engineering(info['wanted_rc_ohm'], 'Ω', 4):>10}")

    with _cluster_pool(args) as pool, tune_progress(args.quiet, job) as progress:
        result = tune(job, out=args.out, strategy=args.strategy, workers=args.workers,
                      pool=pool, allow_control=args.allow_control, resume=args.resume,
                      progress=progress, time_domain=not args.no_report, finish=finish)
    if result.status == "converged":
        return ExitCode.OK
    print(f"amploop: {result.status}: {result.outcome.message}", file=sys.stderr)
    return ExitCode.INFEASIBLE if result.status == "infeasible" else ExitCode.SIMULATOR_FAILURE


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``amploop`` command; returns the exit code.

    Parameters
    ----------
    argv
        The command line after the program name; None for ``sys.argv[1:]``.
    """
    parser = _parser()
    args = parser.parse_args(argv)
    if getattr(args, "workers", None) is not None and args.workers < 1:
        parser.error("--workers must be at least 1")
    if getattr(args, "cluster", None) is not None and args.workers is not None:
        parser.error("--workers and --cluster exclude each other (a cluster's workers are "
                     "set where they are started)")
    try:
        if args.command in ("measure", "tune") and args.cluster is None:
            from amploop.sim.pool import start_fork_server

            start_fork_server()  # its imports overlap with reading the job
        if args.command == "measure":
            return int(_run_measure(args))
        if args.command == "tune":
            return int(_run_tune(args))
        if args.command == "report":
            return int(_run_report(args))
        if args.command == "explore":
            _write_explore(args.out, quiet=False, strict=True)
            return int(ExitCode.OK)
        parser.error(f"unknown command {args.command}")
    except AmploopError as error:
        print(f"amploop: error: {error}", file=sys.stderr)
        return int(_exit_code(error))
    except KeyboardInterrupt:
        print("amploop: interrupted; finished results are in the out folder", file=sys.stderr)
        return int(ExitCode.INTERRUPTED)
    except Exception as exc:  # noqa: BLE001 - the last line of defence: one line, not a traceback
        import os
        import traceback

        if args.debug or os.environ.get("AMPLOOP_DEBUG"):
            traceback.print_exc()
        where = traceback.extract_tb(exc.__traceback__)[-1]
        print(f"amploop: internal error: {type(exc).__name__}: {exc} (at "
              f"{os.path.basename(where.filename)}:{where.lineno}; finished results are in the out "
              "folder; --debug shows the traceback; please report it)", file=sys.stderr)
        return int(ExitCode.INTERNAL)
    return int(ExitCode.OK)
