"""Results as tables and as frequency-response objects for other Python tools: one row
per corner in a pandas DataFrame, and each corner's loop gain as a python-control FRD.

Both libraries are optional (``pip install 'amploop[frames]'``); without them these
functions raise an ImportError whose message is one line saying what to install.
"""

from __future__ import annotations

import importlib

import numpy as np

__all__ = ["COLUMNS", "corner_frd", "corner_rows", "corners_dataframe", "corners_frd"]

#: The columns of :func:`corners_dataframe`, in order.
COLUMNS = ("name", "temperature_c", "dc_loop_gain_db", "unity_gain_hz", "phase_margin_deg",
           "gain_margin_db", "status")


def _optional(module: str, package: str, use: str):
    """The module ``module``, or an ImportError naming the pip ``package`` that ``use``
    needs, in one line."""
    try:
        return importlib.import_module(module)
    except ImportError:
        raise ImportError(f"{use} needs the {package} package: pip install {package} "
                          "(or amploop[frames])") from None


def corner_rows(corners) -> list[dict]:
    """One record per corner result of ``corners`` (a sequence of
    :class:`~amploop.corners.results.CornerResult`), keyed by :data:`COLUMNS`: the corner's
    name, temperature (°C), DC loop gain (dB), unity-gain frequency (Hz), phase margin
    (degrees), gain margin (dB) and status; a figure that was not read is None."""
    rows = []
    for c in corners:
        m = c.margins
        rows.append({
            "name": c.corner.name,
            "temperature_c": c.corner.temp,
            "dc_loop_gain_db": m and m.dc_loop_gain_db,
            "unity_gain_hz": m and m.unity_gain_hz,
            "phase_margin_deg": m and m.phase_margin_deg,
            "gain_margin_db": m and m.gain_margin_db,
            "status": c.status,
        })
    return rows


def corners_dataframe(corners):
    """A pandas DataFrame of :func:`corner_rows` of ``corners`` (the corner results), one
    row per corner in order, missing figures as NaN; an ImportError without pandas."""
    pandas = _optional("pandas", "pandas", "to_dataframe()")
    return pandas.DataFrame.from_records(corner_rows(corners), columns=list(COLUMNS))


def corner_frd(result):
    """The loop gain of the corner result ``result`` as a python-control FRD (complex
    values against angular frequency, rad/s, interpolated smoothly for its margins);
    None when the corner has no loop gain; an ImportError without python-control."""
    control = _optional("control", "control", "to_frd()")
    response = result.loop_gain
    if response is None:
        return None
    return control.FRD(response.values, 2 * np.pi * response.frequency_hz, smooth=True)


def corners_frd(corners) -> dict:
    """Corner name -> :func:`corner_frd` for each corner result of ``corners`` that has a
    loop gain."""
    frds = {c.corner.name: corner_frd(c) for c in corners}
    return {name: frd for name, frd in frds.items() if frd is not None}
