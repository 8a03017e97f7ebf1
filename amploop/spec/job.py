"""The job file: what to simulate, how, and at which corners.

A job is a TOML file (see the README for the reference). :func:`load_job` reads it,
checks every key and value, resolves paths relative to the job file and expands the
corner list, so that nothing is left to fail once simulations have started.
"""

from __future__ import annotations

import itertools
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from amploop.bench.oppoint import OperatingPointLimits, read_limits
from amploop.errors import JobError, did_you_mean
from amploop.spec.resistor_values import check_feedback_resistors, check_rc_text
from amploop.spice.expressions import evaluate
from amploop.spice.units import parse_value

__all__ = [
    "Amplifier",
    "Analysis",
    "Bias",
    "BiasSource",
    "Corner",
    "Feedback",
    "Job",
    "Knob",
    "Target",
    "Transient",
    "load_job",
    "parse_overrides",
    "referenced_params",
    "safe_filename",
]

ProbeKind = Literal["double-injection", "lc"]
FeedbackKind = Literal["resistive", "capacitive"]


@dataclass(frozen=True)
class Amplifier:
    """``[amplifier]``: where the subckt is and which ports are the inputs and output.

    Attributes
    ----------
    netlist
        The file holding the ``.subckt`` (absolute path).
    subckt
        The subckt's name.
    in_p, in_n, out
        Its non-inverting input, inverting input and output ports.
    models
        A model file, plain or of ``.lib`` sections (each corner's ``lib`` picks one);
        None when not given.
    includes
        More files to include in the deck (absolute paths).
    input_device, second_stage_device
        An input-pair transistor and the second-stage driver, for the textbook strategy
        (their gm come from the operating point); None when not given.
    """

    netlist: Path
    subckt: str
    in_p: str
    in_n: str
    out: str
    models: Path | None = None
    includes: tuple[Path, ...] = ()
    input_device: str | None = None
    second_stage_device: str | None = None


@dataclass(frozen=True)
class BiasSource:
    """One ``[bias]`` port: a voltage source to ground, or a current drawn out of the port.

    Attributes
    ----------
    port
        The subckt port.
    kind
        ``"volts"`` (a voltage source to ground) or ``"amps"`` (a current drawn out of the
        port to ground; negative: into it).
    value
        The voltage (volts) or current (amperes), a SPICE expression.
    """

    port: str
    kind: Literal["volts", "amps"]
    value: str  # SPICE expression


@dataclass(frozen=True)
class Bias:
    """``[bias]``: input common mode (SPICE expression, volts) and the other ports' sources.

    Attributes
    ----------
    common_mode
        The input common-mode voltage, volts (a SPICE expression).
    sources
        One source per other biased port, in the order of the job file.
    """

    common_mode: str
    sources: tuple[BiasSource, ...]


@dataclass(frozen=True)
class Feedback:
    """``[feedback]``: the network around the amplifier (values are SPICE expressions).

    ``input`` (Z1) runs from the AC-grounded signal source to the inverting input,
    ``feedback`` (Z2) from the output to the inverting input; ``load`` is a capacitor from
    the output to ground; ``dc_path`` (capacitive loops only) a resistor across Z2.

    Attributes
    ----------
    kind
        ``"resistive"`` (Z1 and Z2 are resistors, ohms) or ``"capacitive"`` (capacitors,
        farads).
    input
        Z1, ohms or farads.
    feedback
        Z2, ohms or farads.
    load
        The load capacitance, farads (``"0"`` when not given).
    dc_path
        The resistor across Z2 of a capacitive loop, ohms (default ``"1G"``).
    """

    kind: FeedbackKind
    input: str
    feedback: str
    load: str
    dc_path: str = "1G"


@dataclass(frozen=True)
class Knob:
    """One ``[compensation]`` entry: a role (``cc`` or ``rc``) and where the netlist keeps it.

    Attributes
    ----------
    role
        ``"cc"`` (farads) or ``"rc"`` (ohms; or metres / a count for a device size).
    where
        ``"param"`` (global ``.param`` or subckt parameter), ``"element"`` (an R or C whose
        value is rewritten) or ``"device"`` (a MOSFET whose ``size`` is tuned).
    name
        The parameter, element or device name.
    size
        For ``where == "device"``: ``"w"``, ``"l"`` or ``"m"``.
    minimum, maximum
        Tuning bounds in SI units; None when not given.
    """

    role: str
    where: Literal["param", "element", "device"]
    name: str
    size: str | None = None
    minimum: float | None = None
    maximum: float | None = None


@dataclass(frozen=True)
class Analysis:
    """``[analysis]``: the AC sweep, the probe and the per-analysis time limit.

    Attributes
    ----------
    start_hz, stop_hz
        The first and last frequency of the AC sweep, Hz.
    points_per_decade
        Points per decade of the sweep.
    probe
        The loop-gain probe: ``"double-injection"`` or ``"lc"``.
    time_limit_s
        Seconds one analysis may take before it counts as hung.
    """

    start_hz: float = 1.0
    stop_hz: float = 10e9
    points_per_decade: int = 40
    probe: ProbeKind = "double-injection"
    time_limit_s: float = 120.0

    def ac_command(self) -> str:
        """The ngspice ``ac dec`` command of this sweep."""
        from amploop.spice.units import spice_number

        return (
            f"ac dec {self.points_per_decade} {spice_number(self.start_hz)} "
            f"{spice_number(self.stop_hz)}"
        )


@dataclass(frozen=True)
class Corner:
    """One corner: a model section, a temperature (°C) and SPICE parameter values (SI).

    Attributes
    ----------
    name
        The corner's name (given, or made from its values).
    lib
        The ``.lib`` section of ``[amplifier].models``; None for none.
    temp
        The temperature, degrees Celsius.
    params
        Lower-case parameter name -> value (SI), the ``[params]`` defaults included.
    """

    name: str
    lib: str | None = None
    temp: float = 27.0
    params: dict[str, float] = field(default_factory=dict)

    def __hash__(self) -> int:
        return hash((self.name, self.lib, self.temp, tuple(sorted(self.params.items()))))


@dataclass(frozen=True)
class Target:
    """``[target]``: phase margin to reach (degrees), how far above it may land, minimum GM.

    Attributes
    ----------
    phase_margin_deg
        The phase margin the worst corner must reach, degrees.
    tolerance_deg
        How far above it the worst corner may land where the bounds allow, degrees.
    gain_margin_db
        The minimum gain margin at every corner, dB; None for no minimum.
    """

    phase_margin_deg: float
    tolerance_deg: float = 1.0
    gain_margin_db: float | None = None


@dataclass(frozen=True)
class Transient:
    """``[transient]``: the closed-loop small-step check of the report.

    Attributes
    ----------
    step_v
        Input step at the signal source, volts (small, so the loop stays linear).
    band
        Settling band relative to the output step (0.001 = 0.1 %).
    stop_s
        Length of the run, seconds; None: 40/(2π·f_u) of the slowest corner.
    resistance_share
        With a MOSFET standing in for Rc: warn when its channel resistance moves by more
        than this share during the step.
    """

    step_v: float = 5e-3
    band: float = 1e-3
    stop_s: float | None = None
    resistance_share: float = 0.1


@dataclass(frozen=True)
class Job:
    """A loaded, checked job file. Paths are absolute; values SI.

    Attributes
    ----------
    path
        The job file.
    name
        The job's name (default: the job file's name without its suffix).
    amplifier, bias, feedback
        The ``[amplifier]``, ``[bias]`` and ``[feedback]`` tables.
    compensation
        Role (``"cc"``, and ``"rc"`` when given) -> where the netlist keeps it.
    analysis
        The ``[analysis]`` table (defaults when it is left out).
    corners
        Every corner, listed ones first, then the ``[corner_grid]`` product; one
        ``nominal`` corner when there are none.
    target
        The ``[target]`` table; None when left out (enough for measure, not for tune).
    transient
        The ``[transient]`` table (defaults when it is left out).
    operating_point
        The ``[operating_point]`` limits that make a measured corner suspect (defaults
        when it is left out).
    raw
        The TOML data as read.
    """

    path: Path
    name: str
    amplifier: Amplifier
    bias: Bias
    feedback: Feedback
    compensation: dict[str, Knob]
    analysis: Analysis
    corners: tuple[Corner, ...]
    target: Target | None = None
    transient: Transient = field(default_factory=Transient)
    operating_point: OperatingPointLimits = field(default_factory=OperatingPointLimits)
    raw: dict[str, Any] = field(default_factory=dict, repr=False, compare=False)

    @property
    def folder(self) -> Path:
        return self.path.parent


# --- schema ----------------------------------------------------------------------------

_TOP_KEYS = {
    "name", "amplifier", "bias", "feedback", "compensation", "analysis", "corners",
    "corner_grid", "target", "params", "transient", "operating_point",
}
_AMPLIFIER_KEYS = {
    "netlist", "subckt", "in_p", "in_n", "out", "models", "includes", "input_device",
    "second_stage_device",
}
_FEEDBACK_KEYS = {"kind", "input", "feedback", "load", "dc_path"}
_KNOB_KEYS = {"param", "element", "device", "size", "min", "max"}
_ANALYSIS_KEYS = {"start", "stop", "points_per_decade", "probe", "time_limit"}
#: The longest [analysis].time_limit, seconds: the pool waits for its workers through
#: poll(), whose time-out is a C int of milliseconds (at most about 2.1e6 s).
MAX_TIME_LIMIT_S = 1e6
_CORNER_KEYS = {"name", "lib", "temp", "params"}
_GRID_KEYS = {"lib", "temp", "params"}
_TARGET_KEYS = {"phase_margin", "tolerance", "gain_margin"}
_TRANSIENT_KEYS = {"step", "band", "stop", "resistance_share"}
_ROLES = ("cc", "rc")
#: A corner grid larger than this is refused before it is expanded.
MAX_CORNERS = 100_000


class _Reader:
    """Reads values out of the TOML tables with messages that name the key path."""

    def __init__(self, path: Path) -> None:
        self.path = path

    def fail(self, place: str, problem: str, hint: str | None = None) -> JobError:
        return JobError(problem, file=self.path, place=place, hint=hint)

    def table(self, data: dict, key: str, place: str, *, required: bool = True) -> dict:
        value = data.get(key)
        if value is None:
            if required:
                raise self.fail(place, f"missing table [{key}]")
            return {}
        if not isinstance(value, dict):
            raise self.fail(place, f"[{key}] must be a table, got {type(value).__name__}")
        return value

    def known(self, data: dict, allowed: set[str], place: str) -> None:
        for key in data:
            if key not in allowed:
                raise self.fail(
                    f"{place}.{_key(key)}" if place else _key(key),
                    f"unknown key {key!r}" + did_you_mean(key, sorted(allowed)),
                )

    def string(self, data: dict, key: str, place: str, *, required: bool = True,
               default: str | None = None) -> str | None:
        value = data.get(key, default)
        if value is None:
            if required:
                raise self.fail(place, f"missing key {key!r}")
            return None
        if not isinstance(value, str) or not value.strip():
            raise self.fail(f"{place}.{key}", f"expected a non-empty string, got {value!r}")
        return value.strip()

    def expression(self, data: dict, key: str, place: str, *, default: str | None = None,
                   nonnegative: bool = False) -> str:
        """A SPICE value or ``{expression}``; plain numbers are checked right away."""
        value = data.get(key, default)
        if value is None:
            raise self.fail(place, f"missing key {key!r}")
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            raise self.fail(f"{place}.{key}", f"expected a value such as \"2p\", got {value!r}")
        text = str(value).strip()
        if "{" not in text and "'" not in text:
            number = self.number(value, f"{place}.{key}")
            if nonnegative and number < 0:
                raise self.fail(f"{place}.{key}", f"must not be negative, got {text}")
        elif not _balanced(text):
            raise self.fail(f"{place}.{key}", f"unbalanced braces or quotes in {text!r}")
        return text

    def number(self, value: Any, place: str, *, nonnegative: bool = False) -> float:
        try:
            number = parse_value(value)
        except ValueError as exc:
            raise self.fail(place, str(exc)) from None
        except OverflowError:  # a TOML integer beyond the float range
            raise self.fail(place, "number too large for a float") from None
        if nonnegative and number < 0:
            raise self.fail(place, f"must not be negative, got {value!r}")
        return number


def _shown(text: object) -> str:
    """A path or name for a message: as it is, or quoted with escapes when it holds control
    characters or line breaks (a message stays one line)."""
    text = str(text)
    return text if text.isprintable() else repr(text)


_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")


def _key(key: str) -> str:
    """A key as a TOML key path writes it: bare, or quoted with escapes, so that a place
    in a message is one line however odd the key (``""``, ``"a\\nb"``)."""
    if _BARE_KEY.fullmatch(key):
        return key
    escaped = []
    for ch in key:
        if ch in '"\\':
            escaped.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F or ch in "\x85\u2028\u2029":
            escaped.append(f"\\u{ord(ch):04x}")
        else:
            escaped.append(ch)
    return '"' + "".join(escaped) + '"'


def _balanced(text: str) -> bool:
    depth = 0
    for ch in text:
        depth += {"{": 1, "}": -1}.get(ch, 0)
        if depth < 0:
            return False
    return depth == 0 and text.count("'") % 2 == 0


_BRACED = re.compile(r"\{([^{}]*)\}|'([^']*)'")
_IDENTIFIER = re.compile(r"[A-Za-z_][\w.]*")
_FUNCTION_NAMES = {"sqrt", "exp", "log", "ln", "log10", "abs", "min", "max", "pow", "pwr", "pi"}


def referenced_params(expression: str) -> set[str]:
    """Lower-case parameter names used inside ``{...}`` or quotes of the SPICE ``expression``."""
    names: set[str] = set()
    for match in _BRACED.finditer(expression):
        inner = match.group(1) if match.group(1) is not None else match.group(2)
        # drop numbers with suffixes such as 2p, 1e-12, 3meg before looking for names
        inner = re.sub(r"(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?[a-zA-Z]*", " ", inner)
        names.update(n.lower() for n in _IDENTIFIER.findall(inner))
    return names - _FUNCTION_NAMES


def load_job(path: str | Path) -> Job:
    """Read and check a job file.

    Parameters
    ----------
    path
        The TOML job file. Every path inside it is relative to its folder.

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
            problem, place = "arrays or tables nested too deeply", _deepest_nesting(text)
        else:
            digits = re.search(r"\d[\d_]{4000,}", text)
            problem = "an integer of thousands of digits" if digits else str(exc)
            place = _place_of(text, digits)
        raise JobError(f"TOML value not readable: {problem}", file=path, place=place) from None
    return _build_job(path, data)


def _place_of(text: str, match: re.Match | None) -> str | None:
    """``line:column`` (1-based) where ``match`` starts in ``text``."""
    if match is None:
        return None
    before = text[: match.start()].replace("\r\n", "\n")
    return f"{before.count(chr(10)) + 1}:{len(before) - before.rfind(chr(10))}"


def _deepest_nesting(text: str) -> str | None:
    """``line:column`` of the deepest ``[`` / ``{`` outside comments and one-line strings
    (only to point at the place after tomllib gave up on the nesting)."""
    depth = deepest = 0
    place = None
    quote = ""
    line, column = 1, 0
    escaped = comment = False
    for ch in text:
        column += 1
        if ch == "\n":
            line, column, quote, comment = line + 1, 0, "", False
        elif comment:
            continue
        elif quote:
            if escaped:
                escaped = False
            elif ch == "\\" and quote == '"':
                escaped = True
            elif ch == quote:
                quote = ""
        elif ch == "#":
            comment = True
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
            if depth > deepest:
                deepest, place = depth, f"{line}:{column}"
        elif ch in "]}":
            depth = max(0, depth - 1)
    return place


def _build_job(path: Path, data: dict) -> Job:
    r = _Reader(path)
    r.known(data, _TOP_KEYS, "")
    name = r.string(data, "name", "name", required=False, default=path.stem)

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
    )

    bias = _bias(r, r.table(data, "bias", "[bias]"))
    feedback = _feedback(r, r.table(data, "feedback", "[feedback]"))
    compensation = _compensation(r, r.table(data, "compensation", "[compensation]"))
    analysis = _analysis(r, r.table(data, "analysis", "[analysis]", required=False))
    target = _target(r, r.table(data, "target", "[target]", required=False))
    transient = _transient(r, r.table(data, "transient", "[transient]", required=False))
    defaults = _params(r, data.get("params", {}), "[params]")
    corners = _corners(r, data, defaults)

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
    )
    _check_corner_libs(r, job)
    _check_corner_params(r, job)
    check_feedback_resistors(job)
    return job


def _existing_file(r: _Reader, job_path: Path, data: dict, key: str, place: str, *,
                   required: bool = True) -> Path | None:
    name = r.string(data, key, place, required=required)
    if name is None:
        return None
    file, found = _resolved_file(r, job_path, name, f"{place}.{key}")
    if not found:
        raise r.fail(f"{place}.{key}", f"file not found: {_shown(file)}")
    return file


def _resolved_file(r: _Reader, job_path: Path, name: str, place: str) -> tuple[Path, bool]:
    """``name`` relative to the job file, resolved, and whether it is a file. A name the
    system refuses (a NUL byte, too long) is a JobError at ``place``."""
    try:
        file = (job_path.parent / name).resolve()
        return file, file.is_file()
    except (OSError, ValueError, RuntimeError) as exc:
        problem = getattr(exc, "strerror", None) or str(exc)
        raise r.fail(place, f"not a usable file name {name!r} ({problem})") from None


def _include_list(r: _Reader, job_path: Path, data: dict) -> tuple[Path, ...]:
    value = data.get("includes", [])
    if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
        raise r.fail("[amplifier].includes", "expected a list of file names")
    files = []
    for i, name in enumerate(value):
        file, found = _resolved_file(r, job_path, name, f"[amplifier].includes[{i}]")
        if not found:
            raise r.fail(f"[amplifier].includes[{i}]", f"file not found: {_shown(file)}")
        files.append(file)
    return tuple(files)


def _bias(r: _Reader, data: dict) -> Bias:
    common_mode = r.expression(data, "common_mode", "[bias]")
    sources = []
    for port, spec in data.items():
        if port == "common_mode":
            continue
        place = f"[bias].{_key(port)}"
        if not isinstance(spec, dict):
            raise r.fail(place, 'expected a table such as { volts = "1.8" } or { amps = "10u" }')
        r.known(spec, {"volts", "amps"}, place)
        if len(spec) != 1:
            raise r.fail(place, "give exactly one of 'volts' or 'amps'")
        kind = next(iter(spec))
        sources.append(BiasSource(port=port, kind=kind, value=r.expression(spec, kind, place)))
    return Bias(common_mode=common_mode, sources=tuple(sources))


def _feedback(r: _Reader, data: dict) -> Feedback:
    r.known(data, _FEEDBACK_KEYS, "[feedback]")
    kind = r.string(data, "kind", "[feedback]")
    if kind not in ("resistive", "capacitive"):
        raise r.fail("[feedback].kind", f"expected 'resistive' or 'capacitive', got {kind!r}"
                     + did_you_mean(kind, ["resistive", "capacitive"]))
    if kind == "resistive" and "dc_path" in data:
        raise r.fail("[feedback].dc_path", "only a capacitive loop takes a dc_path resistor")
    return Feedback(
        kind=kind,
        input=r.expression(data, "input", "[feedback]", nonnegative=True),
        feedback=r.expression(data, "feedback", "[feedback]", nonnegative=True),
        load=r.expression(data, "load", "[feedback]", default="0", nonnegative=True),
        dc_path=r.expression(data, "dc_path", "[feedback]", default="1G", nonnegative=True),
    )


def _compensation(r: _Reader, data: dict) -> dict[str, Knob]:
    r.known(data, set(_ROLES), "[compensation]")
    if "cc" not in data:
        raise r.fail("[compensation]", "missing key 'cc' (where the netlist keeps Cc)")
    knobs = {}
    for role, spec in data.items():
        place = f"[compensation].{role}"
        if not isinstance(spec, dict):
            raise r.fail(place, 'expected a table such as { param = "cc" }')
        r.known(spec, _KNOB_KEYS, place)
        wheres = [w for w in ("param", "element", "device") if w in spec]
        if len(wheres) != 1:
            raise r.fail(place, "give exactly one of 'param', 'element' or 'device'")
        where = wheres[0]
        if where == "device" and role != "rc":
            raise r.fail(place, "only rc can be a device (a MOSFET in triode)")
        size = None
        if where == "device":
            size = r.string(spec, "size", place, required=False, default="w").lower()
            if size not in ("w", "l", "m"):
                raise r.fail(f"{place}.size", f"expected 'w', 'l' or 'm', got {size!r}")
        elif "size" in spec:
            raise r.fail(f"{place}.size", "only a device takes a size")
        for bound in ("min", "max") if role == "rc" and where != "device" else ():
            check_rc_text(spec.get(bound), file=r.path, place=f"{place}.{bound}")
        minimum = None if "min" not in spec else r.number(spec["min"], f"{place}.min",
                                                            nonnegative=True)
        maximum = None if "max" not in spec else r.number(spec["max"], f"{place}.max",
                                                            nonnegative=True)
        if minimum is not None and maximum is not None and minimum > maximum:
            raise r.fail(place, f"min ({spec['min']}) is larger than max ({spec['max']})")
        for bound, value in (("min", minimum), ("max", maximum)):
            if value == 0 and (role == "cc" or where == "device"):  # searched on a log scale
                what = "Cc" if role == "cc" else f"the device's {size.upper()}"
                raise r.fail(f"{place}.{bound}", f"{what} must stay above zero: its {bound} "
                             "bound is 0", hint="give the smallest value worth trying")
        knobs[role] = Knob(role=role, where=where, name=r.string(spec, where, place), size=size,
                           minimum=minimum, maximum=maximum)
    return knobs


def _analysis(r: _Reader, data: dict) -> Analysis:
    r.known(data, _ANALYSIS_KEYS, "[analysis]")
    start = r.number(data.get("start", 1.0), "[analysis].start")
    stop = r.number(data.get("stop", 10e9), "[analysis].stop")
    if start <= 0:
        raise r.fail("[analysis].start", f"must be above 0 Hz, got {data.get('start')!r}")
    if stop <= start:
        raise r.fail("[analysis].stop", "must be above start")
    points = data.get("points_per_decade", 40)
    if isinstance(points, bool) or not isinstance(points, int) or not 2 <= points <= 10000:
        raise r.fail("[analysis].points_per_decade", f"expected an integer 2..10000, got {points!r}")
    probe = data.get("probe", "double-injection")
    if probe not in ("double-injection", "lc"):
        raise r.fail("[analysis].probe", f"expected 'double-injection' or 'lc', got {probe!r}"
                     + did_you_mean(str(probe), ["double-injection", "lc"]))
    time_limit = r.number(data.get("time_limit", 120), "[analysis].time_limit")
    if not 0 < time_limit <= MAX_TIME_LIMIT_S:
        raise r.fail("[analysis].time_limit", f"must be above 0 and at most "
                     f"{MAX_TIME_LIMIT_S:g} seconds (about 11 days), got {data['time_limit']!r}")
    return Analysis(start_hz=start, stop_hz=stop, points_per_decade=points, probe=probe,
                    time_limit_s=time_limit)


def _target(r: _Reader, data: dict) -> Target | None:
    if not data:
        return None
    r.known(data, _TARGET_KEYS, "[target]")
    if "phase_margin" not in data:
        raise r.fail("[target]", "missing key 'phase_margin' (degrees)")
    pm = r.number(data["phase_margin"], "[target].phase_margin")
    if not 0 < pm < 180:
        raise r.fail("[target].phase_margin", f"expected degrees between 0 and 180, got {pm:g}")
    tolerance = r.number(data.get("tolerance", 1.0), "[target].tolerance")
    if tolerance <= 0:
        raise r.fail("[target].tolerance", "must be above 0 degrees")
    gm = data.get("gain_margin")
    gm = None if gm is None else r.number(gm, "[target].gain_margin")
    return Target(phase_margin_deg=pm, tolerance_deg=tolerance, gain_margin_db=gm)


def _transient(r: _Reader, data: dict) -> Transient:
    r.known(data, _TRANSIENT_KEYS, "[transient]")
    step = r.number(data.get("step", 5e-3), "[transient].step")
    if step == 0:
        raise r.fail("[transient].step", "must not be 0 V")
    band = r.number(data.get("band", 1e-3), "[transient].band")
    if not 0 < band < 0.5:
        raise r.fail("[transient].band", f"expected a fraction such as 0.001, got {band:g}")
    stop = data.get("stop")
    stop_s = None if stop is None else r.number(stop, "[transient].stop")
    if stop_s is not None and stop_s <= 0:
        raise r.fail("[transient].stop", "must be above 0 s")
    share = r.number(data.get("resistance_share", 0.1), "[transient].resistance_share")
    if not 0 < share < 10:
        raise r.fail("[transient].resistance_share", f"expected a share such as 0.1, got {share:g}")
    return Transient(step_v=step, band=band, stop_s=stop_s, resistance_share=share)


def _params(r: _Reader, data: Any, place: str) -> dict[str, float]:
    if not isinstance(data, dict):
        raise r.fail(place, "expected a table of parameter = value")
    params = {}
    for key, value in data.items():
        if not _IDENTIFIER.fullmatch(key):
            raise r.fail(f"{place}.{_key(key)}", "not a valid SPICE parameter name")
        params[key.lower()] = r.number(value, f"{place}.{key}")
    return params


def _temperature(r: _Reader, value: Any, place: str) -> float:
    temp = r.number(value, place)
    if temp < -273.15:
        raise r.fail(place, f"{temp:g} °C is below absolute zero")
    return temp


def _corners(r: _Reader, data: dict, defaults: dict[str, float]) -> tuple[Corner, ...]:
    corners: list[Corner] = []
    listed = data.get("corners", [])
    if not isinstance(listed, list):
        raise r.fail("corners", "expected [[corners]] entries")
    for i, entry in enumerate(listed):
        place = f"[[corners]][{i}]"
        if not isinstance(entry, dict):
            raise r.fail(place, "expected a table")
        r.known(entry, _CORNER_KEYS, place)
        params = {**defaults, **_params(r, entry.get("params", {}), f"{place}.params")}
        lib = r.string(entry, "lib", place, required=False)
        temp = _temperature(r, entry.get("temp", 27), f"{place}.temp")
        name = r.string(entry, "name", place, required=False) or _corner_name(lib, temp, params,
                                                                               defaults)
        corners.append(Corner(name=name, lib=lib, temp=temp, params=params))

    grid = r.table(data, "corner_grid", "[corner_grid]", required=False)
    if grid:
        r.known(grid, _GRID_KEYS, "[corner_grid]")
        libs = _grid_list(r, grid, "lib", [None])
        temps = [_temperature(r, t, "[corner_grid].temp") for t in _grid_list(r, grid, "temp", [27])]
        grid_params = grid.get("params", {})
        if not isinstance(grid_params, dict):
            raise r.fail("[corner_grid].params", "expected a table of parameter = [values]")
        names = list(grid_params)
        value_lists = []
        for key in names:
            values = grid_params[key]
            if not _IDENTIFIER.fullmatch(key):  # as in [params]: the names become .param lines
                raise r.fail(f"[corner_grid].params.{_key(key)}",
                             "not a valid SPICE parameter name")
            if not isinstance(values, list) or not values:
                raise r.fail(f"[corner_grid].params.{key}", "expected a non-empty list")
            value_lists.append([r.number(v, f"[corner_grid].params.{key}") for v in values])
        size = len(libs) * len(temps) * math.prod(len(v) for v in value_lists)
        if size > MAX_CORNERS:
            raise r.fail("[corner_grid]", f"makes {size} corners; at most {MAX_CORNERS} are "
                         "allowed", hint="split the job, or fewer values per list")
        for lib in libs:
            if lib is not None and not isinstance(lib, str):
                raise r.fail("[corner_grid].lib", "expected a list of section names")
            for temp in temps:
                for combo in itertools.product(*value_lists):
                    varied = {k.lower(): v for k, v in zip(names, combo)}
                    params = {**defaults, **varied}
                    corners.append(Corner(name=_corner_name(lib, temp, varied, {}), lib=lib,
                                          temp=temp, params=params))
    if not corners:
        corners.append(Corner(name="nominal", lib=None, temp=27.0, params=dict(defaults)))
    seen: dict[str, int] = {}
    for i, corner in enumerate(corners):
        if corner.name in seen:
            raise r.fail(f"corner {corner.name!r}", "two corners have the same name")
        seen[corner.name] = i
    return tuple(corners)


def _grid_list(r: _Reader, grid: dict, key: str, default: list) -> list:
    values = grid.get(key, default)
    if not isinstance(values, list) or not values:
        raise r.fail(f"[corner_grid].{key}", "expected a non-empty list")
    return values


def _corner_name(lib: str | None, temp: float, params: dict[str, float],
                 defaults: dict[str, float]) -> str:
    parts = [lib] if lib else []
    parts.append(f"{temp:g}C")
    for key, value in params.items():
        if defaults.get(key) != value:
            parts.append(f"{key}{value:g}")
    return "_".join(parts)


def _check_corner_libs(r: _Reader, job: Job) -> None:
    from amploop.errors import NetlistError
    from amploop.spice.netlist import lib_sections

    models = job.amplifier.models
    wanted = [c for c in job.corners if c.lib is not None]
    if models is None:
        if wanted:
            raise r.fail(f"corner {wanted[0].name!r}",
                         f"lib = {wanted[0].lib!r} needs [amplifier].models (a file of .lib sections)")
        return
    try:
        sections = lib_sections(models)
    except NetlistError as exc:
        raise r.fail("[amplifier].models", _shown(exc)) from None
    if not sections:
        return  # a plain model file: included whole
    for corner in job.corners:
        if corner.lib is None:
            raise r.fail(
                f"corner {corner.name!r}",
                f"no lib given, but {_shown(models.name)} holds sections "
                + ", ".join(map(_shown, sections))
                + "; name one with lib = \"...\"",
            )
        if corner.lib.lower() not in sections:
            raise r.fail(
                f"corner {corner.name!r}",
                f"lib {corner.lib!r} is not a section of {_shown(models)}"
                + did_you_mean(corner.lib, sections),
            )


def _check_corner_params(r: _Reader, job: Job) -> None:
    """Every parameter an expression uses is set by every corner; passive values not negative."""
    expressions = [("[bias].common_mode", job.bias.common_mode, False)]
    expressions += [(f"[bias].{_key(s.port)}", s.value, False) for s in job.bias.sources]
    for key in ("input", "feedback", "load", "dc_path"):
        expressions.append((f"[feedback].{key}", getattr(job.feedback, key), True))
    for corner in job.corners:
        for place, expression, passive in expressions:
            missing = referenced_params(expression) - set(corner.params)
            if missing:
                raise r.fail(
                    place,
                    f"uses parameter {min(missing)!r}, which corner {corner.name!r} does not set",
                    hint="set it in the corner's params or in a top-level [params] table",
                )
            if passive:
                try:
                    value = evaluate(expression, {k: repr(v) for k, v in corner.params.items()})
                except ValueError:
                    continue  # leave exotic expressions to the simulator
                if value < 0 or not math.isfinite(value):
                    raise r.fail(place, f"is {value:g} at corner {corner.name!r}: must not be negative")


def parse_overrides(items: list[str] | None, job: Job) -> dict[str, float]:
    """``--set cc=1.5p`` items -> ``{"cc": 1.5e-12}``, checked against ``[compensation]``.

    Parameters
    ----------
    items
        The ``ROLE=VALUE`` items (values take SPICE suffixes); None for none.
    job
        The loaded job whose compensation roles they must name.

    Returns
    -------
    dict
        Role -> value in SI units (farads for ``cc``).

    Raises
    ------
    JobError
        For a malformed item, a role the job does not have, or a bad or negative value.
    """
    values: dict[str, float] = {}
    for item in items or []:
        role, eq, text = item.partition("=")
        role = role.strip().lower()
        if not eq or not role:
            raise JobError(f"--set {item!r}: expected ROLE=VALUE, e.g. cc=1.5p")
        if role not in job.compensation:
            raise JobError(
                f"--set {item!r}: the job has no compensation role {role!r}"
                + did_you_mean(role, list(job.compensation)),
                file=job.path, place="[compensation]",
            )
        try:
            value = parse_value(text)
        except ValueError as exc:
            raise JobError(f"--set {item!r}: {exc}") from None
        if value < 0:
            raise JobError(f"--set {item!r}: must not be negative")
        if role == "rc" and job.compensation[role].where != "device":
            check_rc_text(text, place=f"--set {item!r}")
        if role == "cc" and value == 0:
            raise JobError(f"--set {item!r}: Cc must be above zero")
        values[role] = value
    return values


_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]")


def safe_filename(name: str) -> str:
    """A file-name-safe form of ``name`` (a corner or job name): no separators, dots-only or
    controls; at most 120 characters."""
    cleaned = _UNSAFE.sub("_", name).strip("._") or "unnamed"
    return cleaned[:120]
