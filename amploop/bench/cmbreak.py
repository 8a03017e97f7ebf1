"""The common-mode loop's break point in a fully-differential amplifier's netlist.

The user marks the common-mode feedback (CMFB) path with a 0 V voltage source inside the
subckt, its first node on the side that drives the path (the error amplifier's output),
its second on the side that is driven (the gates it sets). The testbench takes the source
out and brings its two nodes out as extra ports of the subckt, so that the loop-gain
probe sits between them at the top level, where its sources are altered and read like
the differential loop's. Text in, text out.
"""

from __future__ import annotations

from dataclasses import dataclass

from amploop.bench.knobsites import closest_names
from amploop.errors import NetlistError
from amploop.spec.model import Job
from amploop.spice.netlist import Subckt
from amploop.spice.rewrite import add_subckt_ports
from amploop.spice.source import Statement
from amploop.spice.units import parse_value

__all__ = ["CommonModeBreak", "dc_value", "locate_common_mode_break", "zero_volt_source"]

_GROUND = {"0", "gnd"}


@dataclass(frozen=True)
class CommonModeBreak:
    """The user's 0 V source on the common-mode feedback path.

    Attributes
    ----------
    statement
        Its element statement.
    drive, driven
        Its first node (the driving side) and its second (the driven side), as written.
    """

    statement: Statement
    drive: str
    driven: str

    @property
    def nodes(self) -> tuple[str, str]:
        """The two nodes brought out as ports, driving side first."""
        return (self.drive, self.driven)

    def removed_text(self) -> str:
        """The comment that stands in the deck where the source was."""
        return (f"* amploop: {self.statement.tokens[0]} ({self.drive} -> {self.driven}) is "
                "replaced by the common-mode loop's probe at the top level")

    def header_text(self, header: Statement) -> str:
        """The subckt's header ``header`` with the two nodes appended to its ports."""
        return add_subckt_ports(header, self.nodes)


def locate_common_mode_break(job: Job, subckt: Subckt) -> CommonModeBreak | None:
    """The source ``[amplifier].common_mode_break`` of ``job`` names in ``subckt`` (the
    user's amplifier); None when the job names none.

    Parameters
    ----------
    job
        The loaded job.
    subckt
        The job's subckt in the user's netlist.

    Raises
    ------
    NetlistError
        When it is not an element of the subckt, not a voltage source, not 0 V (DC, with
        no AC value), or when a node of it is ground or a port (the break must sit inside).
    """
    name = job.amplifier.common_mode_break
    if name is None:
        return None
    place = "[amplifier].common_mode_break"
    statement = None if "." in name else subckt.element(name)
    statement = zero_volt_source(statement, name, subckt.elements(), f"subckt {subckt.name}",
                                 "the common-mode feedback path", job, place)
    where = f"{statement.file.name}:{statement.line}"
    drive, driven = statement.tokens[1], statement.tokens[2]
    for node in (drive, driven):
        if node.lower() in _GROUND:
            raise NetlistError(f"{statement.tokens[0]} ({where}) ties {node} to ground: the "
                               "break must sit on the path, between two inner nodes",
                               file=job.path, place=place)
        if subckt.port_index(node) is not None:
            raise NetlistError(f"{statement.tokens[0]} ({where}) sits on port {node}: the "
                               "break must sit inside the subckt, between two inner nodes",
                               file=job.path, place=place)
    if drive.lower() == driven.lower():
        raise NetlistError(f"{statement.tokens[0]} ({where}) has both ends on {drive}",
                           file=job.path, place=place)
    return CommonModeBreak(statement=statement, drive=drive, driven=driven)


def zero_volt_source(statement: Statement | None, name: str, elements, within: str, on: str,
                     job: Job, place: str) -> Statement:
    """``statement``, the element a job names ``name`` as a loop's break, checked: found
    among ``elements`` (of ``within``, e.g. ``"subckt ota"``; their voltage sources are
    listed when not), a voltage source, and 0 V at DC with no AC value (the break must
    leave the operating point alone). Each failure is a NetlistError at ``place`` of
    ``job``'s file; ``on`` names the loop the break belongs on."""
    if statement is None:
        sources = [s.tokens[0] for s in elements if s.keyword.startswith("v")]
        raise NetlistError(f"{name!r} is not an element of {within} (its voltage sources: "
                           f"{' '.join(sources) or 'none'})" + closest_names(name, sources),
                           file=job.path, place=place)
    where = f"{statement.file.name}:{statement.line}"
    if not statement.keyword.startswith("v") or len(statement.tokens) < 3:
        raise NetlistError(f"{statement.tokens[0]} ({where}) is not a voltage source; the "
                           f"break is a 0 V voltage source on {on}", file=job.path,
                           place=place)
    if dc_value(statement.tokens[3:]) != 0.0:
        shown = " ".join(statement.tokens[3:]) or "no value"
        raise NetlistError(f"{statement.tokens[0]} ({where}) is not a 0 V source ({shown}); "
                           "the break must leave the operating point alone",
                           file=job.path, place=place, hint="give it 'dc 0' and nothing else")
    return statement


def dc_value(tokens: tuple[str, ...]) -> float | None:
    """The DC value of ``tokens``, a voltage source's value tokens (``0``, ``dc 0``,
    ``dc=0`` or none: 0); None for anything else (an AC value, a waveform, an expression)."""
    words = [t.lower() for t in tokens]
    if words and words[0].startswith("dc="):
        words = ["dc", words[0][3:]] + words[1:]
    if words and words[0] == "dc":
        words = words[1:]
    if not words:
        return 0.0
    if len(words) != 1:
        return None
    try:
        return parse_value(words[0])
    except ValueError:
        return None
