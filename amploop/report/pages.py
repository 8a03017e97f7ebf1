"""What every page of the report shares: the sheet, the cautions footer, and how a
figure or the compensation values read on a page. The pages themselves are one module
each (:mod:`.summary`, :mod:`.overview`, :mod:`.corner`, :mod:`.mapview`,
:mod:`.history`, :mod:`.steps`)."""

from __future__ import annotations

import textwrap

import matplotlib.pyplot as plt

from amploop.report import style
from amploop.spice.units import describe_values, engineering

__all__ = ["CAUTIONS", "footer", "new_page", "shown_value", "values_text"]

CAUTIONS = (
    "Results are only as good as the device models and netlist they were simulated with. "
    "A small-signal loop gain says nothing about slewing or large-signal settling. "
    "Sign-off stays with the designer's own models, simulator, flow and foundry rules."
)


def new_page():
    """A blank page (A4 landscape, :data:`~.style.PAGE`)."""
    return plt.figure(figsize=style.PAGE)


def shown_value(value, spec: str, unit: str = "") -> str:
    """``value`` on a page: with ``unit``, in engineering notation (``21.4 MHz``); else
    with the format ``spec`` (``".2f"``); a dash when it is None."""
    if value is None:
        return "–"
    if unit:
        return engineering(value, unit)
    return format(value, spec)


def values_text(values: dict, results: dict | None = None) -> str:
    """The compensation ``values`` (SI by role) as the terminal shows them, with the
    device's name when ``results`` (results.json) says a MOSFET stands in for Rc."""
    device = (results or {}).get("device")
    return describe_values(values, (device["name"], device["size"]) if device else None)


def footer(fig, extra: str = "") -> None:
    """The cautions (and ``extra``) along the foot of the page ``fig``."""
    text = "Cautions: " + CAUTIONS + (f"  {extra}" if extra else "")
    for i, part in enumerate(textwrap.wrap(text, 190)):
        fig.text(0.05, 0.045 - 0.018 * i, part, fontsize=7, color=style.MUTED)


