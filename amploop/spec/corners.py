"""The corner list: ``[[corners]]`` and ``[corner_grid]`` expanded to :class:`Corner`
objects, each checked against the model file's ``.lib`` sections and the parameters the
netlist knows."""

from __future__ import annotations

import itertools
import math

from amploop.errors import did_you_mean, one_line
from amploop.spec.model import Corner, Job
from amploop.spec.reader import Reader, key_path
from amploop.spec.sections import read_params, read_temperature
from amploop.spice.expressions import PARAM_NAME, evaluate, referenced_params

__all__ = ["MAX_CORNERS", "check_corner_libs", "check_corner_params", "read_corners",
           "with_configurations"]

_CORNER_KEYS = {"name", "lib", "temp", "params"}


_GRID_KEYS = {"lib", "temp", "params"}


#: A corner grid larger than this is refused before it is expanded.
MAX_CORNERS = 100_000


def read_corners(r: Reader, data: dict, defaults: dict[str, float]) -> tuple[Corner, ...]:
    """The corners of ``data`` (the whole job table), read with ``r``: ``[[corners]]``
    as listed, or ``[corner_grid]`` expanded; ``defaults`` are the job's ``[params]``,
    which each corner's own override."""
    corners: list[Corner] = []
    listed = data.get("corners", [])
    if not isinstance(listed, list):
        raise r.fail("corners", "expected [[corners]] entries")
    for i, entry in enumerate(listed):
        place = f"[[corners]][{i}]"
        if not isinstance(entry, dict):
            raise r.fail(place, "expected a table")
        r.known(entry, _CORNER_KEYS, place)
        params = {**defaults, **read_params(r, entry.get("params", {}), f"{place}.params")}
        lib = r.string(entry, "lib", place, required=False)
        temp = read_temperature(r, entry.get("temp", 27), f"{place}.temp")
        name = r.string(entry, "name", place, required=False) or _corner_name(lib, temp, params,
                                                                               defaults)
        corners.append(Corner(name=name, lib=lib, temp=temp, params=params))

    grid = r.table(data, "corner_grid", "[corner_grid]", required=False)
    if grid:
        r.known(grid, _GRID_KEYS, "[corner_grid]")
        libs = _grid_list(r, grid, "lib", [None])
        temps = [read_temperature(r, t, "[corner_grid].temp") for t in _grid_list(r, grid, "temp", [27])]
        grid_params = grid.get("params", {})
        if not isinstance(grid_params, dict):
            raise r.fail("[corner_grid].params", "expected a table of parameter = [values]")
        names = list(grid_params)
        value_lists = []
        for key in names:
            values = grid_params[key]
            if not PARAM_NAME.fullmatch(key):  # as in [params]: the names become .param lines
                raise r.fail(f"[corner_grid].params.{key_path(key)}",
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


def with_configurations(corners: tuple[Corner, ...], configurations) -> tuple[Corner, ...]:
    """Every corner of ``corners`` in every one of ``configurations`` (``[[feedback]]``
    entries), configuration by configuration, each named ``<corner>@<configuration>``;
    ``corners`` as they are without configurations."""
    from dataclasses import replace

    if not configurations:
        return corners
    return tuple(replace(c, name=f"{c.name}@{f.name}", configuration=f.name)
                 for f in configurations for c in corners)


def _grid_list(r: Reader, grid: dict, key: str, default: list) -> list:
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


def check_corner_libs(r: Reader, job: Job) -> None:
    """Every ``.lib`` section a corner of ``job`` names exists in its models file; a
    miss is raised through ``r`` with the sections that do exist."""
    from amploop.errors import NetlistError
    from amploop.spice.source import lib_sections

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
        raise r.fail("[amplifier].models", one_line(exc)) from None
    if not sections:
        return  # a plain model file: included whole
    for corner in job.corners:
        if corner.lib is None:
            raise r.fail(
                f"corner {corner.name!r}",
                f"no lib given, but {one_line(models.name)} holds sections "
                + ", ".join(map(one_line, sections))
                + "; name one with lib = \"...\"",
            )
        if corner.lib.lower() not in sections:
            raise r.fail(
                f"corner {corner.name!r}",
                f"lib {corner.lib!r} is not a section of {one_line(models)}"
                + did_you_mean(corner.lib, sections),
            )


def check_corner_params(r: Reader, job: Job) -> None:
    """Every parameter an expression of ``job`` uses is set by every corner; passive
    values not negative (failures raised through ``r``)."""
    common = [("[bias].common_mode", job.bias.common_mode, False)]
    common += [(f"[bias].{key_path(s.port)}", s.value, False) for s in job.bias.sources]
    for corner in job.corners:
        feedback = job.feedback_for(corner)
        expressions = common + [(f"{feedback.place}.{key}", getattr(feedback, key), True)
                                for key in ("input", "feedback", "load", "dc_path", "input_load")
                                if feedback is not None]
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
