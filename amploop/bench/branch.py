"""The compensation branch as elements of the netlist: which R and C hold Rc and Cc, the
node between them, and whether anything else connects to that node.

Two uses: the map strategy picks its form from it (one impedance Z = Rc + 1/(sCc) when
the node between the two elements touches nothing else, the two-element form when it
does: wiring, a bottom-plate capacitance), and a corner's characterisation samples run
in one loaded circuit with the two elements changed in place (``alter``) between them.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from amploop.bench.amplifier import Amplifier
from amploop.spice.source import Statement

__all__ = ["CompensationBranch", "compensation_branch"]

#: The subckt instance every generated testbench places the amplifier as.
INSTANCE = "x1"


@dataclass(frozen=True)
class CompensationBranch:
    """Where Rc and Cc sit as elements inside the amplifier's subckt.

    Attributes
    ----------
    cc_element, rc_element
        Element names (``Cc``, ``Rc``); ``rc_element`` None when Rc is not tuned.
    middle
        The node between Rc and Cc (lower case); None when they share none.
    middle_connections
        How many other terminals of the subckt's elements sit on ``middle`` (wiring, a
        bottom-plate capacitance; a port counts as one).
    """

    cc_element: str
    rc_element: str | None
    middle: str | None
    middle_connections: int

    @property
    def form(self) -> str:
        """``"two-element"`` when the node between Rc and Cc has other connections (the
        loop gain is then bilinear in Rc and in 1/Cc separately), else
        ``"one-impedance"`` (bilinear in Z = Rc + 1/(sCc))."""
        return "two-element" if self.rc_element and self.middle_connections else "one-impedance"


def _element_of(amplifier: Amplifier, role: str, letter: str) -> Statement | None:
    """The one element of kind ``letter`` (``"c"``, ``"r"``) that holds the knob ``role``:
    the element itself for an element knob, else the only element of the subckt whose
    value is exactly that parameter (``{cc}`` or ``cc``); None when there is no such
    single element."""
    site = amplifier.sites.get(role)
    if site is None or site.twins:
        return None
    if site.kind == "element":
        statement = site.statement
        return statement if statement.keyword.startswith(letter) else None
    if site.kind not in ("subckt-param", "param"):
        return None
    name = site.knob.name.lower()
    pattern = re.compile(rf"^\{{?\s*{re.escape(name)}\s*\}}?$", re.IGNORECASE)
    found = [s for s in amplifier.subckt.elements()
             if s.keyword.startswith(letter) and len(s.tokens) >= 4 and pattern.match(s.tokens[3])]
    uses = [s for s in amplifier.subckt.body if any(name in t.lower() for t in s.tokens[1:])
            and s.keyword != ".subckt"]
    return found[0] if len(found) == 1 and len(uses) == 1 else None


def compensation_branch(amplifier: Amplifier) -> CompensationBranch | None:
    """The compensation branch of a single-ended amplifier with amploop's own testbench.

    Parameters
    ----------
    amplifier
        The prepared amplifier.

    Returns
    -------
    CompensationBranch or None
        None where the branch cannot be named as two elements (a device for Rc, matched
        halves, a knob that is not one R or C element's whole value, a user's testbench,
        a fully differential amplifier).
    """
    if amplifier.device is not None or amplifier.user_deck is not None \
            or amplifier.fully_differential:
        return None
    cc = _element_of(amplifier, "cc", "c")
    if cc is None:
        return None
    rc = _element_of(amplifier, "rc", "r") if "rc" in amplifier.sites else None
    if "rc" in amplifier.sites and rc is None:
        return None
    if rc is None:
        return CompensationBranch(cc.tokens[0], None, None, 0)
    shared = {n.lower() for n in cc.tokens[1:3]} & {n.lower() for n in rc.tokens[1:3]}
    if len(shared) != 1:
        return CompensationBranch(cc.tokens[0], rc.tokens[0], None, 0)
    middle = shared.pop()
    count = sum(1 for port in amplifier.subckt.ports if port.lower() == middle)
    for statement in amplifier.subckt.elements():
        if statement in (cc, rc):
            continue
        count += sum(1 for t in _terminals(statement) if t.lower() == middle)
    return CompensationBranch(cc.tokens[0], rc.tokens[0], middle, count)


def _terminals(statement: Statement) -> list[str]:
    """The node names of an element line (an X line's nodes up to its subckt name; a
    MOSFET's four; two for R, C, L, V, I and the like)."""
    tokens = [t for t in statement.tokens[1:] if "=" not in t and t.lower() != "params:"]
    letter = statement.keyword[:1]
    if letter == "x":
        return tokens[:-1]
    if letter == "m":
        return tokens[:4]
    if letter in "qj":
        return tokens[:3]
    if letter in "efgh":
        return tokens[:4] if letter in "eg" else tokens[:2]
    return tokens[:2]
