"""The job file: what to simulate, how, and at which corners.

A job is a TOML file (see the README for the reference), or the same tables as a dict.
:func:`load_job` reads it, checks every key and value, resolves paths relative to the job
file (or a dict's base folder) and expands the corner list, so that nothing is left to
fail once simulations have started.
"""

from __future__ import annotations

import copy
import re
import tomllib
from pathlib import Path

from amploop.errors import JobError, one_line
from amploop.spec.corners import (
    check_corner_libs,
    check_corner_params,
    read_corners,
    with_configurations,
)
from amploop.spec.model import (
    Amplifier,
    Bias,
    Job,
    UserTestbench,
)
from amploop.spec.montecarlo import expand_samples, read_monte_carlo
from amploop.spec.reader import Reader, deepest_nesting, place_of
from amploop.spec.resistor_values import check_feedback_resistors
from amploop.spec.sections import (
    read_analysis,
    read_bias,
    read_compensation,
    read_configurations,
    read_feedback,
    read_limits,
    read_params,
    read_target,
    read_transient,
)

__all__ = ["load_job"]


# --- schema ----------------------------------------------------------------------------

_TOP_KEYS = {
    "name", "amplifier", "bias", "feedback", "compensation", "analysis", "corners",
    "corner_grid", "target", "params", "transient", "operating_point", "testbench",
    "monte_carlo",
}
_AMPLIFIER_KEYS = {
    "netlist", "subckt", "in_p", "in_n", "out", "models", "includes", "input_device",
    "second_stage_device", "out_n", "common_mode_break", "common_mode_reference",
}


#: The file name a job built from a dict goes by in messages (inside its base folder).
DICT_NAME = "<dict>"


def load_job(path: str | Path | dict, base: str | Path = ".") -> Job:
    """Read and check a job file, or a job given as a dict.

    Parameters
    ----------
    path
        The TOML job file (every path inside it is relative to its folder), or a dict of
        the same tables as :func:`tomllib.load` gives (a notebook's job).
    base
        For a dict only: the folder its file names are relative to (default: the current
        folder). The job's ``path`` is then ``base/<dict>``, the name messages give, and
        its name, when the dict gives none, is ``"job"``.

    Returns
    -------
    Job

    Raises
    ------
    JobError
        For a missing file, a TOML syntax error, an unknown key (with a did-you-mean),
        an unparseable or negative value, a missing file it names, a ``.lib`` section that
        the models file does not define, or a corner that leaves a used parameter unset.
    """
    if isinstance(path, dict):
        return _build_job(Path(base).resolve() / DICT_NAME, copy.deepcopy(path))
    path = Path(path).resolve()
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise JobError("job file not found", file=path) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise JobError(f"cannot read the job file: {exc}", file=path) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        message = str(exc)
        match = re.search(r"\(at line (\d+), column (\d+)\)", message)
        if match:
            place = f"{match.group(1)}:{match.group(2)}"
        else:  # "(at end of document)": name the line and column after the last character
            lines = text.replace("\r\n", "\n").split("\n")
            place = f"{len(lines)}:{len(lines[-1]) + 1}"
        problem = re.sub(r"\s*\(at (line \d+, column \d+|end of document)\)", "", message)
        raise JobError(f"TOML syntax error: {problem}", file=path, place=place) from None
    except (ValueError, RecursionError) as exc:  # an integer of thousands of digits; nesting
        if isinstance(exc, RecursionError):
            problem, place = "arrays or tables nested too deeply", deepest_nesting(text)
        else:
            digits = re.search(r"\d[\d_]{4000,}", text)
            problem = "an integer of thousands of digits" if digits else str(exc)
            place = place_of(text, digits)
        raise JobError(f"TOML value not readable: {problem}", file=path, place=place) from None
    return _build_job(path, data)


def _build_job(path: Path, data: dict) -> Job:
    r = Reader(path)
    r.known(data, _TOP_KEYS, "")
    stem = "job" if path.name == DICT_NAME else path.stem
    name = r.string(data, "name", "name", required=False, default=stem)

    amp_data = r.table(data, "amplifier", "[amplifier]")
    r.known(amp_data, _AMPLIFIER_KEYS, "[amplifier]")
    amplifier = Amplifier(
        netlist=_existing_file(r, path, amp_data, "netlist", "[amplifier]"),
        subckt=r.string(amp_data, "subckt", "[amplifier]"),
        in_p=r.string(amp_data, "in_p", "[amplifier]"),
        in_n=r.string(amp_data, "in_n", "[amplifier]"),
        out=r.string(amp_data, "out", "[amplifier]"),
        models=_existing_file(r, path, amp_data, "models", "[amplifier]", required=False),
        includes=_include_list(r, path, amp_data),
        input_device=r.string(amp_data, "input_device", "[amplifier]", required=False),
        second_stage_device=r.string(amp_data, "second_stage_device", "[amplifier]",
                                     required=False),
        out_n=r.string(amp_data, "out_n", "[amplifier]", required=False),
        common_mode_break=r.string(amp_data, "common_mode_break", "[amplifier]",
                                   required=False),
        common_mode_reference=r.string(amp_data, "common_mode_reference", "[amplifier]",
                                       required=False),
    )

    testbench = None
    configurations = ()
    if "testbench" in data:  # the user's own closed-loop deck
        testbench = read_user_testbench(r, path, r.table(data, "testbench", "[testbench]"),
                                        outputs=1 if amplifier.out_n is None else 2)
        for table in ("feedback", "bias"):
            if table in data:
                raise r.fail(f"[{table}]", f"give [{table}] or [testbench], not both: the "
                             "testbench's own deck sets " + ("the loop around the amplifier"
                                                             if table == "feedback" else
                                                             "the amplifier's bias"))
        bias, feedback = Bias(common_mode="0", sources=()), None
    else:
        bias = read_bias(r, r.table(data, "bias", "[bias]"))
        if isinstance(data.get("feedback"), list):  # [[feedback]]: several configurations
            configurations = read_configurations(r, data["feedback"])
            feedback = configurations[0]
        else:
            feedback = read_feedback(r, r.table(data, "feedback", "[feedback]"))
    compensation = read_compensation(r, r.table(data, "compensation", "[compensation]"))
    analysis = read_analysis(r, r.table(data, "analysis", "[analysis]", required=False))
    target = read_target(r, r.table(data, "target", "[target]", required=False))
    transient = read_transient(r, r.table(data, "transient", "[transient]", required=False))
    defaults = read_params(r, data.get("params", {}), "[params]")
    monte_carlo = read_monte_carlo(r, data, target and target.yield_fraction)
    if target is not None and target.statistical and monte_carlo is None:
        raise r.fail("[target].sigma" if target.sigma is not None else "[target].yield",
                     "a statistical target needs samples", hint="add a [monte_carlo] table")
    corners = read_corners(r, data, defaults)
    corners = expand_samples(r, corners, monte_carlo,
                             _netlist_numbers(amplifier.netlist, monte_carlo))
    corners = with_configurations(corners, configurations)

    _check_differential(r, amplifier, target, compensation, analysis,
                        configurations or ((feedback,) if feedback else ()))
    _check_reference(r, amplifier, bias)
    job = Job(
        path=path,
        name=name,
        amplifier=amplifier,
        bias=bias,
        feedback=feedback,
        compensation=compensation,
        analysis=analysis,
        corners=corners,
        target=target,
        transient=transient,
        operating_point=read_limits(r, r.table(data, "operating_point", "[operating_point]",
                                               required=False)),
        raw=data,
        configurations=configurations,
        testbench=testbench,
        monte_carlo=monte_carlo,
    )
    check_corner_libs(r, job)
    check_corner_params(r, job)
    check_feedback_resistors(job)
    return job


def _netlist_numbers(netlist: Path, monte_carlo) -> dict[str, float]:
    """The top-level ``.param`` values of ``netlist`` that evaluate to numbers (SI), when
    ``monte_carlo`` draws a parameter (the nominal of one no corner sets); else nothing."""
    if monte_carlo is None or not monte_carlo.params:
        return {}
    from amploop.errors import NetlistError
    from amploop.spice.expressions import evaluate
    from amploop.spice.netlist import read_netlist

    try:
        exprs = {k: e for k, (_, e) in read_netlist(netlist).global_params.items()}
    except NetlistError:
        return {}  # the netlist's own reading reports it, with its place
    values = {}
    for name, expr in exprs.items():
        try:
            values[name] = evaluate(expr, exprs)
        except ValueError:
            continue
    return values


def _check_differential(r: Reader, amplifier: Amplifier, target, compensation,
                        analysis, configurations=()) -> None:
    """The keys of a fully-differential job agree: two distinct outputs, a common-mode
    break only with them, common-mode targets only with a break, element pairs only for a
    fully-differential amplifier."""
    if amplifier.out_n is not None and amplifier.out_n.lower() == amplifier.out.lower():
        raise r.fail("[amplifier].out_n", f"is the same port as out ({amplifier.out!r}); "
                     "a fully-differential amplifier has two outputs")
    if amplifier.out_n is not None and any(c.kind == "unity" for c in configurations):
        raise r.fail("[[feedback]]", "a unity configuration of a fully-differential "
                     "amplifier is not supported yet", hint="give it as capacitive with "
                     "input_load, or measure it single-ended")
    if amplifier.out_n is not None and analysis.probe != "double-injection":
        raise r.fail("[analysis].probe", f"a fully-differential amplifier is measured by "
                     f"double injection only, not {analysis.probe!r}")
    if amplifier.common_mode_break is not None and amplifier.out_n is None:
        raise r.fail("[amplifier].common_mode_break", "a common-mode break needs a "
                     "fully-differential amplifier", hint="give its second output as out_n")
    if target is not None and amplifier.common_mode_break is None:
        for key, value in (("common_mode_phase_margin", target.common_mode_phase_margin_deg),
                           ("common_mode_gain_margin", target.common_mode_gain_margin_db)):
            if value is not None:
                raise r.fail(f"[target].{key}", "a common-mode target needs the loop's break",
                             hint="name the 0 V source on the common-mode feedback path as "
                             "[amplifier].common_mode_break")
    for role, knob in compensation.items():
        if knob.twins and amplifier.out_n is None:
            raise r.fail(f"[compensation].{role}.element", "a list of elements sets the two "
                         "halves of a fully-differential amplifier", hint="give out_n, or "
                         "one element")


def read_user_testbench(r: Reader, job_path: Path, data: dict, *, outputs: int
                        ) -> UserTestbench:
    """The ``[testbench]`` table ``data`` of the job file at ``job_path``, read with ``r``:
    the deck (a file next to the job's), its break source (a list of ``outputs`` of them
    for a fully-differential amplifier), and the optional ``beta`` and ``load``."""
    r.known(data, {"netlist", "break", "beta", "load"}, "[testbench]")
    netlist = _existing_file(r, job_path, data, "netlist", "[testbench]")
    breaks = data.get("break")
    if isinstance(breaks, str):
        breaks = [breaks]
    if not isinstance(breaks, list) or not all(isinstance(b, str) and b.strip() for b in breaks):
        raise r.fail("[testbench].break", "expected the name of the 0 V source where the loop "
                     "is broken" + (", or a list of two" if outputs == 2 else ""))
    if len(breaks) != outputs:
        raise r.fail("[testbench].break", f"a {'fully-differential' if outputs == 2 else 'single-ended'} "
                     f"amplifier's loop is broken at {outputs} source{'s' if outputs == 2 else ''}, "
                     f"one per output; got {len(breaks)}")
    beta = None if "beta" not in data else r.number(data["beta"], "[testbench].beta")
    if beta is not None and not 0 < beta <= 1:
        raise r.fail("[testbench].beta", f"expected a feedback factor between 0 and 1, got {beta:g}")
    load = None if "load" not in data else r.number(data["load"], "[testbench].load",
                                                    nonnegative=True)
    return UserTestbench(netlist=netlist, breaks=tuple(b.strip() for b in breaks), beta=beta,
                         load_f=load)


def _check_reference(r: Reader, amplifier: Amplifier, bias) -> None:
    """``common_mode_reference`` names a port of a fully-differential amplifier that
    ``[bias]`` drives with a voltage source."""
    port = amplifier.common_mode_reference
    if port is None:
        return
    place = "[amplifier].common_mode_reference"
    if amplifier.out_n is None:
        raise r.fail(place, "only a fully-differential amplifier has an output common-mode "
                     "reference", hint="give its second output as out_n")
    sources = {s.port.lower(): s for s in bias.sources}
    source = sources.get(port.lower())
    if source is None or source.kind != "volts":
        raise r.fail(place, f"{port!r} is not a port that [bias] drives with a voltage source",
                     hint=f'add {port} = {{ volts = "..." }} to [bias]')


def _existing_file(r: Reader, job_path: Path, data: dict, key: str, place: str, *,
                   required: bool = True) -> Path | None:
    name = r.string(data, key, place, required=required)
    if name is None:
        return None
    file, found = _resolved_file(r, job_path, name, f"{place}.{key}")
    if not found:
        raise r.fail(f"{place}.{key}", f"file not found: {one_line(file)}")
    return file


def _resolved_file(r: Reader, job_path: Path, name: str, place: str) -> tuple[Path, bool]:
    """``name`` relative to the job file, resolved, and whether it is a file. A name the
    system refuses (a NUL byte, too long) is a JobError at ``place``."""
    try:
        file = (job_path.parent / name).resolve()
        return file, file.is_file()
    except (OSError, ValueError, RuntimeError) as exc:
        problem = getattr(exc, "strerror", None) or str(exc)
        raise r.fail(place, f"not a usable file name {name!r} ({problem})") from None


def _include_list(r: Reader, job_path: Path, data: dict) -> tuple[Path, ...]:
    value = data.get("includes", [])
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise r.fail("[amplifier].includes", "expected a list of file names")
    files = []
    for i, name in enumerate(value):
        file, found = _resolved_file(r, job_path, name, f"[amplifier].includes[{i}]")
        if not found:
            raise r.fail(f"[amplifier].includes[{i}]", f"file not found: {one_line(file)}")
        files.append(file)
    return tuple(files)


