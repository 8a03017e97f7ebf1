"""One reader per table of the job file (``[bias]``, ``[feedback]``, ``[compensation]``,
``[analysis]``, ``[target]``, ``[transient]``, ``[operating_point]``): keys checked,
values parsed to SI, each failure one line naming the key path."""

from __future__ import annotations

from typing import Any

from amploop.errors import did_you_mean
from amploop.spec.limits import OBJECTIVES, Analysis, OperatingPointLimits, Target, Transient
from amploop.spec.model import Bias, BiasSource, Feedback, Knob
from amploop.spec.reader import Reader, key_path
from amploop.spec.resistor_values import check_rc_text
from amploop.spice.expressions import PARAM_NAME

__all__ = [
    "MAX_TIME_LIMIT_S",
    "read_analysis",
    "read_bias",
    "read_compensation",
    "read_configurations",
    "read_feedback",
    "read_limits",
    "read_params",
    "read_target",
    "read_temperature",
    "read_transient",
]


def read_bias(r: Reader, data: dict) -> Bias:
    """``[bias]`` of the job table ``data``, read with ``r``: one voltage or current
    source per port."""
    common_mode = r.expression(data, "common_mode", "[bias]")
    sources = []
    for port, spec in data.items():
        if port == "common_mode":
            continue
        place = f"[bias].{key_path(port)}"
        if not isinstance(spec, dict):
            raise r.fail(place, 'expected a table such as { volts = "1.8" } or { amps = "10u" }')
        r.known(spec, {"volts", "amps"}, place)
        if len(spec) != 1:
            raise r.fail(place, "give exactly one of 'volts' or 'amps'")
        kind = next(iter(spec))
        sources.append(BiasSource(port=port, kind=kind, value=r.expression(spec, kind, place)))
    return Bias(common_mode=common_mode, sources=tuple(sources))


def read_feedback(r: Reader, data: dict, place: str = "[feedback]",
                  name: str | None = None) -> Feedback:
    """A feedback table ``data`` at ``place`` (``[feedback]``, or an entry of the
    ``[[feedback]]`` array named ``name``), read with ``r``: the kind and the input,
    feedback, load, DC-path and input-load elements."""
    r.known(data, _FEEDBACK_KEYS | ({"name"} if name is not None else set()), place)
    kind = r.string(data, "kind", place)
    kinds = ["resistive", "capacitive", "unity"]
    if kind not in kinds:
        raise r.fail(f"{place}.kind", f"expected 'resistive', 'capacitive' or 'unity', got "
                     f"{kind!r}" + did_you_mean(kind, kinds))
    if kind != "capacitive" and "dc_path" in data:
        raise r.fail(f"{place}.dc_path", "only a capacitive loop takes a dc_path resistor")
    for key in ("input", "feedback") if kind == "unity" else ():
        if key in data:
            raise r.fail(f"{place}.{key}", "a unity configuration ties the output to the "
                         "inverting input: it has no input or feedback element",
                         hint="give the capacitance on the inverting input as input_load")
    unity = kind == "unity"
    return Feedback(
        kind=kind,
        input="0" if unity else r.expression(data, "input", place, nonnegative=True),
        feedback="0" if unity else r.expression(data, "feedback", place, nonnegative=True),
        load=r.expression(data, "load", place, default="0", nonnegative=True),
        dc_path=r.expression(data, "dc_path", place, default="1G", nonnegative=True),
        input_load=r.expression(data, "input_load", place, default="0", nonnegative=True),
        name=name,
    )


def read_configurations(r: Reader, data: object) -> tuple[Feedback, ...]:
    """The ``[[feedback]]`` array ``data`` read with ``r``: one named configuration per
    entry, the names distinct also as file names (:func:`~amploop.spec.names.safe_filename`)."""
    from amploop.spec.names import safe_filename

    if not isinstance(data, list) or not data or not all(isinstance(d, dict) for d in data):
        raise r.fail("[[feedback]]", "expected one or more [[feedback]] tables")
    configurations, stems = [], {}
    for i, entry in enumerate(data):
        place = f"[[feedback]][{i}]"
        name = r.string(entry, "name", place)
        if "@" in name:
            raise r.fail(f"{place}.name", f"{name!r} holds '@', which joins a corner's name "
                         "to its configuration's")
        stem = safe_filename(name).lower()
        if stem in stems:
            raise r.fail(f"{place}.name", f"{name!r} and {stems[stem]!r} are the same name in "
                         f"file names ({safe_filename(name)!r})", hint="rename one of them")
        stems[stem] = name
        configurations.append(read_feedback(r, entry, f'[[feedback]] "{name}"', name))
    return tuple(configurations)


def read_compensation(r: Reader, data: dict) -> dict[str, Knob]:
    """``[compensation]`` of the job table ``data``, read with ``r``: a :class:`Knob` by
    role (``cc``, and ``rc`` when given)."""
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
        names = _knob_names(r, spec, where, place)
        knobs[role] = Knob(role=role, where=where, name=names[0], size=size,
                           minimum=minimum, maximum=maximum, twins=names[1:])
    return knobs


def _knob_names(r: Reader, spec: dict, where: str, place: str) -> tuple[str, ...]:
    """The name a knob's ``where`` key gives, or for ``element`` a list of two matched
    elements (the halves of a fully-differential amplifier), first one first."""
    value = spec.get(where)
    if where != "element" or not isinstance(value, list):
        return (r.string(spec, where, place),)
    if len(value) != 2 or not all(isinstance(v, str) and v for v in value):
        raise r.fail(f"{place}.element", "expected one element name, or a list of the two "
                     'matched elements such as ["Cc1", "Cc2"]')
    if value[0].lower() == value[1].lower():
        raise r.fail(f"{place}.element", f"names {value[0]!r} twice")
    return tuple(value)


def read_analysis(r: Reader, data: dict) -> Analysis:
    """``[analysis]`` of the job table ``data``, read with ``r``: the AC sweep (Hz), the
    probe and the time limit (s); defaults for what it leaves out."""
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


def read_target(r: Reader, data: dict) -> Target | None:
    """``[target]`` of the job table ``data``, read with ``r`` (degrees and dB); None
    when the table is absent."""
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
    cm_pm = data.get("common_mode_phase_margin")
    if cm_pm is not None:
        cm_pm = r.number(cm_pm, "[target].common_mode_phase_margin")
        if not 0 < cm_pm < 180:
            raise r.fail("[target].common_mode_phase_margin",
                         f"expected degrees between 0 and 180, got {cm_pm:g}")
    cm_gm = data.get("common_mode_gain_margin")
    cm_gm = None if cm_gm is None else r.number(cm_gm, "[target].common_mode_gain_margin")
    if "sigma" in data and "yield" in data:
        raise r.fail("[target].yield", "give sigma or yield, not both: each is a rule for the "
                     "sampled corners on its own")
    sigma = None if "sigma" not in data else r.number(data["sigma"], "[target].sigma")
    if sigma is not None and not 0 < sigma <= 10:
        raise r.fail("[target].sigma", f"expected a number of standard deviations above 0 "
                     f"(such as 3), got {sigma:g}")
    share = None if "yield" not in data else r.number(data["yield"], "[target].yield")
    if share is not None and not 0 < share < 1:
        raise r.fail("[target].yield", f"expected a fraction between 0 and 1 (such as 0.99), "
                     f"got {share:g}")
    objective = data.get("objective", "bandwidth")
    if objective not in OBJECTIVES:
        raise r.fail("[target].objective", f"expected \"bandwidth\" or \"settling\", got "
                     f"{objective!r}")
    ceiling = data.get("settling_time")
    if ceiling is not None:
        ceiling = r.number(ceiling, "[target].settling_time")
        if ceiling <= 0:
            raise r.fail("[target].settling_time", "must be above 0 s, such as \"20n\"")
    return Target(phase_margin_deg=pm, tolerance_deg=tolerance, gain_margin_db=gm,
                  common_mode_phase_margin_deg=cm_pm, common_mode_gain_margin_db=cm_gm,
                  sigma=sigma, yield_fraction=share, objective=objective,
                  settling_time_s=ceiling)


def read_transient(r: Reader, data: dict) -> Transient:
    """``[transient]`` of the job table ``data``, read with ``r``: the step (V), the
    settling band (a share), the stop time (s), the triode check's resistance share."""
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


def read_params(r: Reader, data: Any, place: str) -> dict[str, float]:
    """A table of SPICE parameters ``data`` at ``place``, read with ``r``: lower-case
    name -> value."""
    if not isinstance(data, dict):
        raise r.fail(place, "expected a table of parameter = value")
    params = {}
    for key, value in data.items():
        if not PARAM_NAME.fullmatch(key):
            raise r.fail(f"{place}.{key_path(key)}", "not a valid SPICE parameter name")
        params[key.lower()] = r.number(value, f"{place}.{key}")
    return params


def read_temperature(r: Reader, value: Any, place: str) -> float:
    """A corner temperature ``value`` at ``place`` in degrees Celsius, read with ``r``;
    below absolute zero is refused."""
    temp = r.number(value, place)
    if temp < -273.15:
        raise r.fail(place, f"{temp:g} °C is below absolute zero")
    return temp


_KEYS = {"min_dc_loop_gain", "max_output_shift"}


def read_limits(reader, data: dict) -> OperatingPointLimits:
    """The ``[operating_point]`` table ``data`` read with the job reader ``reader``
    (``job._Reader``); defaults for what it leaves out."""
    reader.known(data, _KEYS, "[operating_point]")
    gain = reader.number(data.get("min_dc_loop_gain", 20.0),
                         "[operating_point].min_dc_loop_gain")
    share = reader.number(data.get("max_output_shift", 0.1), "[operating_point].max_output_shift")
    if not 0 < share <= 1:
        raise reader.fail("[operating_point].max_output_shift",
                          f"expected a share of the supply span such as 0.1, got {share:g}")
    return OperatingPointLimits(min_dc_loop_gain_db=gain, max_output_shift=share)


_FEEDBACK_KEYS = {"kind", "input", "feedback", "load", "dc_path", "input_load"}


_KNOB_KEYS = {"param", "element", "device", "size", "min", "max"}


_ANALYSIS_KEYS = {"start", "stop", "points_per_decade", "probe", "time_limit"}


#: The longest [analysis].time_limit, seconds: the pool waits for its workers through
#: poll(), whose time-out is a C int of milliseconds (at most about 2.1e6 s).
MAX_TIME_LIMIT_S = 1e6


_TARGET_KEYS = {"phase_margin", "tolerance", "gain_margin", "common_mode_phase_margin",
                "common_mode_gain_margin", "sigma", "yield", "objective", "settling_time"}


_TRANSIENT_KEYS = {"step", "band", "stop", "resistance_share"}


_ROLES = ("cc", "rc")
