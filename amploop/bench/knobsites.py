"""Where each compensation value lives in the user's netlist: a subckt parameter, a
``.param``, an R or C element, or the size of a MOSFET standing in for Rc."""

from __future__ import annotations

from dataclasses import dataclass

from amploop.errors import NetlistError, did_you_mean
from amploop.spec.model import Job, Knob
from amploop.spice.netlist import Netlist, Subckt, value_of
from amploop.spice.rewrite import element_value
from amploop.spice.source import Statement
from amploop.spice.units import engineering

__all__ = ["Device", "KnobSite", "closest_names", "device_site", "locate_knob"]


@dataclass(frozen=True)
class KnobSite:
    """Where one compensation value lives in the netlist.

    Attributes
    ----------
    knob
        The job's description of it.
    kind
        ``"subckt-param"`` (a default in the ``.subckt`` header: overridden on the
        instance line), ``"param"`` (a ``.param`` statement, global or inside the subckt),
        ``"element"`` (an R or C value) or ``"device"`` (a MOSFET size).
    statement
        The statement that holds it (the ``.subckt`` header for subckt parameters).
    value
        The value in effect in the netlist, SI.
    twins
        The statements of the knob's matched elements (:attr:`Knob.twins`), set with it.
    """

    knob: Knob
    kind: str
    statement: Statement
    value: float
    twins: tuple[Statement, ...] = ()

    @property
    def statements(self) -> tuple[Statement, ...]:
        """Every statement the knob's value is written into: its own, then its twins'."""
        return (self.statement, *self.twins)


@dataclass(frozen=True)
class Device:
    """A MOSFET that stands in for Rc.

    Attributes
    ----------
    name
        Its element name inside the subckt (``M7``).
    drain, gate, source, bulk
        Its terminals: subckt nodes.
    model
        Its model name.
    size
        The instance parameter that is tuned: ``"w"``, ``"l"`` or ``"m"``.
    length
        L in metres when the line gives it (for the square law), else None.
    """

    name: str
    drain: str
    gate: str
    source: str
    bulk: str
    model: str
    size: str  # "w", "l" or "m"
    length: float | None  # L in metres when given (for the square law)

    def quantity(self, name: str) -> str:
        """ngspice's name of the operating-point quantity ``name`` (``"gds"``) of this
        device inside X1."""
        return f"@m.x1.{self.name.lower()}[{name}]"


def device_site(job: Job, subckt: Subckt, site: KnobSite, scope: dict) -> tuple[Device, str | None]:
    """The MOSFET at ``site`` of ``subckt`` (``job``'s Rc device): its terminals and model,
    sizes evaluated in ``scope`` (parameter expressions), and a warning when it sits on
    the output side."""
    statement = site.statement
    positional = [t for t in statement.tokens[1:] if "=" not in t]
    if len(positional) < 5:
        raise NetlistError(f"{statement.tokens[0]}: expected drain, gate, source, bulk and model",
                           file=statement.file, place=statement.line)
    drain, gate, source, bulk, model = positional[:5]
    length = None
    for token in statement.tokens[1:]:
        key, eq, expr = token.partition("=")
        if eq and key.lower() == "l":
            length = value_of(expr, scope, where=statement.where)
    device = Device(name=statement.tokens[0], drain=drain, gate=gate, source=source, bulk=bulk,
                    model=model, size=site.knob.size or "w", length=length)
    out = job.amplifier.out.lower()
    warning = None
    if out in (drain.lower(), source.lower()):
        warning = (
            f"{statement.file}:{statement.line}: {device.name} touches the amplifier output "
            f"{job.amplifier.out}: the output swings the second stage's gain times more than "
            "the first-stage side of Cc, so its channel resistance would be modulated by the "
            "signal; put it between the first-stage output and Cc"
        )
    return device, warning


def closest_names(name: str, choices) -> str:
    """Only the did-you-mean part for ``name`` among ``choices`` (the message lists the
    choices already)."""
    text = did_you_mean(name, choices)
    return text if "did you mean" in text else ""


def _twin(netlist: Netlist, subckt: Subckt, knob: Knob, name: str, value: float,
          scope: dict) -> Statement:
    """The statement of ``name``, the matched twin of ``knob`` whose own element holds
    ``value`` (SI): the same kind of element, with the same value."""
    place = f"[compensation].{knob.role}.element"
    statement = subckt.element(name)
    first = knob.name
    if statement is None:
        names = [s.tokens[0] for s in subckt.elements()]
        raise NetlistError(f"{place}: no element {name!r} in subckt {subckt.name}"
                           + did_you_mean(name, names), file=netlist.root,
                           place=subckt.header.line)
    if statement.keyword[0] != first[0].lower():
        raise NetlistError(f"{place}: {statement.tokens[0]} is not the same kind of element "
                           f"as {first}", file=statement.file, place=statement.line)
    twin_value = value_of(element_value(statement), scope, where=statement.where)
    if abs(twin_value - value) > 1e-9 * max(abs(value), abs(twin_value)):
        unit = "F" if knob.role == "cc" else "Ω"
        raise NetlistError(
            f"{place}: {first} is {engineering(value, unit, 4)} and {statement.tokens[0]} "
            f"is {engineering(twin_value, unit, 4)}; the two halves are set to one value "
            "together", file=statement.file, place=statement.line,
            hint="give both the same value in the netlist")
    return statement


def locate_knob(job: Job, netlist: Netlist, subckt: Subckt, knob: Knob, global_exprs: dict,
                header_params: dict, local: dict) -> KnobSite:
    """Where ``knob`` of ``job`` lives in ``netlist``, inside ``subckt`` or globally: the
    parameter expressions in scope are ``global_exprs`` (``.param`` outside), the
    ``header_params`` of the ``.subckt`` line and its ``local`` ``.param`` lines (name ->
    (statement, expression)). A knob not found raises a NetlistError with a did-you-mean."""
    place = f"[compensation].{knob.role}"
    name = knob.name.lower()
    scope = {**global_exprs, **header_params, **{k: v[1] for k, v in local.items()}}
    if knob.where == "param":
        if name in header_params:
            value = value_of(header_params[name], scope, where=subckt.header.where)
            return KnobSite(knob, "subckt-param", subckt.header, value)
        if name in local:
            statement, expr = local[name]
            return KnobSite(knob, "param", statement, value_of(expr, scope, where=statement.where))
        if name in netlist.global_params:
            statement, expr = netlist.global_params[name]
            return KnobSite(knob, "param", statement, value_of(expr, scope, where=statement.where))
        known = list(header_params) + list(local) + list(netlist.global_params)
        raise NetlistError(
            f"{place}: no parameter {knob.name!r} in subckt {subckt.name} or a global .param"
            + did_you_mean(knob.name, known),
            file=netlist.root,
        )
    statement = subckt.element(knob.name)
    if statement is None:
        names = [s.tokens[0] for s in subckt.elements()]
        raise NetlistError(
            f"{place}: no element {knob.name!r} in subckt {subckt.name}" + did_you_mean(knob.name, names),
            file=netlist.root, place=subckt.header.line,
        )
    if knob.where == "element":
        expected = "c" if knob.role == "cc" else "r"
        if statement.keyword[0] != expected:
            kind = "capacitor" if expected == "c" else "resistor"
            raise NetlistError(
                f"{place}: {statement.tokens[0]} is not a {kind}", file=statement.file,
                place=statement.line,
            )
        expr = element_value(statement)
        value = value_of(expr, scope, where=statement.where)
        twins = tuple(_twin(netlist, subckt, knob, name, value, scope) for name in knob.twins)
        return KnobSite(knob, "element", statement, value, twins)
    # a MOSFET standing in for Rc
    if statement.keyword[0] != "m":
        raise NetlistError(f"{place}: {statement.tokens[0]} is not a MOSFET", file=statement.file,
                           place=statement.line)
    size = knob.size or "w"
    for token in statement.tokens[1:]:
        key, eq, expr = token.partition("=")
        if eq and key.lower() == size:
            return KnobSite(knob, "device", statement, value_of(expr, scope, where=statement.where))
    if size == "m":
        return KnobSite(knob, "device", statement, 1.0)
    raise NetlistError(
        f"{place}: {statement.tokens[0]} has no {size}= to tune", file=statement.file,
        place=statement.line,
    )
