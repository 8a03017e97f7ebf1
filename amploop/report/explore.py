"""The what-if page: ``explore.html``, every corner's loop gain and margins at any (Cc, Rc)
predicted from the compensation maps, in one self-contained HTML file; of a
fully-differential amplifier both loops, the common-mode loop from its own maps.

The page holds each corner's map as its coefficients, T(Z) = (a·Z + b)/(c·Z + d) per
frequency (:meth:`~amploop.analysis.compmap.CompensationMap.coefficients`), divided by c
and stored as little-endian float64 in base64: six numbers per frequency and corner.
Its script (``explore.js``, inlined) evaluates the maps and reads the margins as
:func:`~amploop.analysis.margins.loop_margins` does (the same local cubics, the same
unwrapping), so its figures are amploop's own prediction. Nothing is simulated; the
history's simulated points are shown as such. Built from the out folder alone.
"""

from __future__ import annotations

import base64
import json
import time
from collections.abc import Mapping
from importlib import resources
from pathlib import Path

import numpy as np

from amploop.analysis.compmap import CompensationMap
from amploop.corners.outputs import OutFolder, clean_json, is_folder
from amploop.errors import JobError, OutputError
from amploop.report.data import load_report_data
from amploop.report.style import COMMON_MODE as COMMON_MODE_COLOUR
from amploop.report.style import COMMON_MODE_LINE
from amploop.spice.labels import (
    COMMON_MODE,
    COMMON_MODE_LABELS,
    FIGURE_LABELS,
    PHASE_MARGIN_CORNER,
    ROLE_LABELS,
    WORST_PHASE_MARGIN_CORNER,
)
from amploop.spice.units import SCALE_SUFFIXES
from amploop.strategy.kinds import kind_label

__all__ = ["EXPLORE_FILE", "ExploreOutcome", "build_explore", "explore_page", "remove_explore"]

#: The page's name in the out folder.
EXPLORE_FILE = "explore.html"

#: The figures the margins table shows, by their results.json key.
TABLE_KEYS = ("dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg", "gain_margin_db")

_MAP_KINDS = ("characterise", "characterise-ports", "report-map")

#: The page's scripts, inlined in this order: the maths, the Bode plots, the map view,
#: then the controls and the table (which start the page).
SCRIPTS = ("explore.js", "explore_bode.js", "explore_map.js", "explore_ui.js")


class ExploreOutcome:
    """Where the page went and what it took.

    Parameters
    ----------
    path
        The page written.
    size_bytes
        Its size, bytes.
    corners
        How many corners it has maps of.
    seconds
        Wall time of reading and writing, seconds.
    """

    def __init__(self, path: Path, size_bytes: int, corners: int, seconds: float) -> None:
        self.path, self.size_bytes, self.corners, self.seconds = path, size_bytes, corners, seconds


def _b64(array: np.ndarray) -> str:
    return base64.b64encode(np.ascontiguousarray(array, dtype="<f8").tobytes()).decode("ascii")


def _coefficients(cmap: CompensationMap) -> np.ndarray:
    """(A, B, D) = (a, b, d)/c per frequency, as (re, im) pairs: shape (n_f, 6).

    c ≠ 0 wherever the loop gain with the branch open (Cc = 0), a/c, is finite."""
    a, b, c, d = cmap.coefficients()
    with np.errstate(divide="ignore", invalid="ignore"):
        parts = [a / c, b / c, d / c]
    out = np.empty((cmap.frequency_hz.size, 6))
    for k, part in enumerate(parts):
        out[:, 2 * k], out[:, 2 * k + 1] = part.real, part.imag
    return out


def _history(results: dict) -> list[dict]:
    """The simulated points of the run, as the page shows them (no journal keys)."""
    points = []
    for entry in results.get("history", []):
        if "cc" not in entry.get("values", {}):
            continue
        points.append({"step": entry["step"], "kind": entry["kind"],
                       "label": entry.get("label") or kind_label(entry["kind"]),
                       "values": entry["values"],
                       "worst_phase_margin_deg": entry.get("worst_phase_margin_deg"),
                       "worst_corner": entry.get(WORST_PHASE_MARGIN_CORNER)})
    return points


def _sample_size(results: dict) -> float | None:
    """The device size the maps' samples were simulated at (the last three map samples)."""
    samples = [h for h in results.get("history", []) if h.get("kind") in _MAP_KINDS][-3:]
    return samples[-1]["values"].get("rc") if samples else None


def _bounds(results: dict, maps: Mapping[str, CompensationMap]) -> dict:
    """The sliders' ranges: the job's bounds, else three times around the maps' samples."""
    bounds = dict(results.get("bounds") or {})
    samples = [s for cmap in maps.values() for s in cmap.samples]
    if "cc" not in bounds and samples:
        bounds["cc"] = [min(s[0] for s in samples) / 3, max(s[0] for s in samples) * 3]
    if "rc" not in bounds:
        top = max([s[1] for s in samples] + [1.0])
        bounds["rc"] = [0.0, 3 * top]
    return bounds


def _figures(corner: dict) -> dict:
    return {key: corner.get(key) for key in TABLE_KEYS}


def _grid_index(grids: list[np.ndarray], frequency_hz: np.ndarray) -> int:
    """The index of ``frequency_hz`` in ``grids``, appended when it is a new grid."""
    for i, grid in enumerate(grids):
        if grid.shape == frequency_hz.shape and np.array_equal(grid, frequency_hz):
            return i
    grids.append(frequency_hz)
    return len(grids) - 1


def _style() -> dict:
    """The common-mode loop's colour and dash pattern (units of the line width), as the
    report draws it."""
    _offset, dashes = COMMON_MODE_LINE
    return {"common_mode": COMMON_MODE_COLOUR, "common_mode_dash": list(dashes)}


def explore_payload(results: dict, maps: Mapping[str, CompensationMap],
                    cm_maps: Mapping[str, CompensationMap] | None = None) -> dict:
    """Everything the page's script reads: the job, the labels, the controls' ranges and
    jumps, and each corner's map (base64 float64) with its simulated figures.

    Parameters
    ----------
    results
        The run's results.json as read.
    maps
        Corner name -> its compensation map (corners without one are listed without).
    cm_maps
        Corner name -> the compensation map of its common-mode loop (a fully-differential
        amplifier's; None or empty for one loop).
    """
    cm_maps = cm_maps or {}
    device = results.get("device")
    grids: list[np.ndarray] = []
    corners = []
    for corner in results.get("corners", []):
        name = corner["name"]
        entry = {"name": name, "status": corner.get("status"), "simulated": _figures(corner),
                 "configuration": corner.get("configuration")}
        if COMMON_MODE in corner:
            entry["cm_simulated"] = _figures(corner[COMMON_MODE] or {})
        cmap = maps.get(name)
        if cmap is not None:
            entry |= {"grid": _grid_index(grids, cmap.frequency_hz),
                      "coef": _b64(_coefficients(cmap))}
            if device is not None:  # the square law: R(size) = r_ref · (size_ref/size)^±1
                entry["r_ref"] = cmap.samples[0][1]
            cm_map = cm_maps.get(name)
            if cm_map is not None:
                entry |= {"cm_grid": _grid_index(grids, cm_map.frequency_hz),
                          "cm_coef": _b64(_coefficients(cm_map))}
        corners.append(entry)
    worst = results.get("worst") or {}
    return clean_json({
        "job": results.get("job"), "command": results.get("command"),
        "strategy": results.get("strategy"), "status": results.get("status"),
        "loops": results.get("loops"),
        "target": results.get("target") or {},
        "values": results.get("values") or {},
        "netlist": results.get("values_in_netlist") or {},
        "bounds": _bounds(results, maps),
        "device": None if device is None else {
            "name": device["name"], "size": device["size"], "size_ref": _sample_size(results)},
        "limiting": worst.get(PHASE_MARGIN_CORNER),
        "history": _history(results),
        "labels": {"roles": ROLE_LABELS,
                   "figures": {k: FIGURE_LABELS[k].replace("\n", " ") for k in TABLE_KEYS},
                   "cm_figures": {k: COMMON_MODE_LABELS[k].replace("\n", " ")
                                  for k in TABLE_KEYS}},
        "style": _style(),
        "suffixes": SCALE_SUFFIXES,
        "grids": [_b64(g) for g in grids],
        "corners": corners,
    })


def _template(name: str) -> str:
    return resources.files("amploop.report").joinpath(name).read_text(encoding="utf-8")


def explore_page(results: dict, maps: Mapping[str, CompensationMap],
                 cm_maps: Mapping[str, CompensationMap] | None = None) -> str:
    """The page's HTML: the template with its script and data inline (no network).

    Parameters
    ----------
    results
        The run's results.json as read.
    maps
        Corner name -> its compensation map.
    cm_maps
        Corner name -> the compensation map of its common-mode loop (fully-differential
        amplifiers; None for one loop).
    """
    data = json.dumps(explore_payload(results, maps, cm_maps), separators=(",", ":"),
                      ensure_ascii=False).replace("</", "<\\/")
    script = "\n".join(_template(name) for name in SCRIPTS).replace("</", "<\\/")
    title = f"amploop what-if: {results.get('job', '')}"
    return (_template("explore.html.in")
            .replace("@TITLE@", _escape(title))
            .replace("@CM_COLOUR@", COMMON_MODE_COLOUR)
            .replace("@DATA@", data)
            .replace("@SCRIPT@", script))


def _escape(text: str) -> str:
    return text.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def build_explore(out: str | Path) -> ExploreOutcome:
    """Write ``explore.html`` into an out folder of a ``tune`` with the map strategy.

    Read from results.json and the journal alone (no simulation), under the folder's
    lock (joined when the run that wrote the folder holds it).

    Parameters
    ----------
    out
        The out folder.

    Raises
    ------
    JobError
        When ``out`` is no out folder of amploop's, or holds no compensation maps (a
        measure, or a tune with the textbook strategy).
    OutputError, JournalError
        When the journal lacks what results.json names, or the page cannot be written.
    """
    started = time.perf_counter()
    if not is_folder(out):
        raise JobError("not a folder", file=out)
    folder = OutFolder(out)
    with folder.lock(join=True), load_report_data(folder.path) as data:
        if not data.maps:
            by_ports = any(h.get("kind") == "characterise-ports"
                           for h in data.results.get("history", []))
            raise JobError(
                "no compensation maps in this out folder: " + (
                    "this tune characterised its corners at the compensation's ports and ran "
                    "no report, so the page's sampled maps were not simulated" if by_ports
                    else "explore.html needs a tune with the map strategy"),
                file=data.out / "results.json",
                hint="run the same tune without --no-report; the journal makes it quick"
                if by_ports else None)
        maps = {name: data.maps[name] for name in data.maps}
        cm_maps = {name: data.cm_maps[name] for name in data.cm_maps}
        text = explore_page(data.results, maps, cm_maps)
        path = folder.write_text(EXPLORE_FILE, text)
    return ExploreOutcome(path, len(text.encode("utf-8")), len(maps),
                          time.perf_counter() - started)


def remove_explore(out: str | Path) -> bool:
    """Remove an earlier run's ``explore.html`` from ``out`` (a run that leaves no maps, so
    that no page of other results looks current); whether there was one.

    Parameters
    ----------
    out
        The out folder.
    """
    path = Path(out) / EXPLORE_FILE
    try:
        path.unlink()
    except FileNotFoundError:
        return False
    except OSError as exc:
        raise OutputError(f"cannot remove the earlier run's {EXPLORE_FILE}: {exc.strerror}",
                          file=out) from None
    return True
