"""The user's amplifier as the job describes it: netlist read, ports checked, knobs located.

This is the netlist stage of the pipeline: it ties the job file to the netlist text,
finds where each compensation value is kept (a subckt parameter, a ``.param`` line, an
element's value, or a device's size), reads the values in effect, and produces the
text edits that set new values. It reads files but never simulates.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from amploop.bench.cmbreak import CommonModeBreak, locate_common_mode_break
from amploop.bench.knobsites import Device, KnobSite, closest_names, device_site, locate_knob
from amploop.bench.nodes import NODE_AMP, NODE_AMP_N, NODE_CM_DRIVE, NODE_CM_DRIVEN, bias_node
from amploop.bench.usertb import UserDeck, read_user_deck
from amploop.errors import NetlistError
from amploop.spec.model import Job
from amploop.spice.deckfiles import files_read
from amploop.spice.lexer import tokenize
from amploop.spice.netlist import Netlist, Subckt, read_netlist
from amploop.spice.rewrite import (
    render_file,
    replace_element_value,
    replace_instance_param,
    replace_param,
)
from amploop.spice.source import Statement, read_source
from amploop.spice.units import spice_number

__all__ = ["Amplifier", "prepare_amplifier"]


@dataclass(frozen=True)
class Amplifier:
    """A job's amplifier netlist, checked against the job and ready for testbenches.

    Attributes
    ----------
    job
        The job it was prepared for.
    netlist
        The user's netlist as read, with the job's ``includes``.
    subckt
        The job's subckt in it.
    sites
        Role (``"cc"``, ``"rc"``) -> where the netlist keeps that value.
    reads
        Every file a testbench reads, transitively (:func:`amploop.spice.deckfiles.files_read`).
    device
        The MOSFET that stands in for Rc; None when Rc is not a device.
    warnings
        Remarks for the user, such as a device for Rc that touches the output.
    common_mode_break
        The 0 V source on the common-mode feedback path of a fully-differential amplifier
        that the probe replaces; None when the job names none.
    user_deck
        The user's own testbench (``[testbench]``), read and checked; None when amploop
        writes its own.
    """

    job: Job
    netlist: Netlist
    subckt: Subckt
    sites: dict[str, KnobSite]
    reads: tuple[Path, ...] = ()
    device: Device | None = None
    warnings: tuple[str, ...] = ()
    common_mode_break: CommonModeBreak | None = None
    user_deck: UserDeck | None = None

    @property
    def fully_differential(self) -> bool:
        """Whether the amplifier has two outputs."""
        return self.job.amplifier.fully_differential

    @property
    def extra_ports(self) -> tuple[str, ...]:
        """The testbench nodes the instance line adds after the subckt's own ports: the two
        sides of the common-mode break, when there is one."""
        return (NODE_CM_DRIVE, NODE_CM_DRIVEN) if self.common_mode_break else ()

    def node_vector(self, node: str) -> str:
        """ngspice's vector name of the voltage of subckt node ``node`` in the testbench:
        ``v(x1.nz)`` for an inner node, the testbench node's for a port, ``"0"`` for ground."""

        index = self.subckt.port_index(node)
        if node == "0":
            return "0"
        brk = self.common_mode_break
        if index is None and brk is not None and node.lower() in map(str.lower, brk.nodes):
            return f"v({NODE_CM_DRIVE if node.lower() == brk.drive.lower() else NODE_CM_DRIVEN})"
        if index is None:
            return f"v(x1.{node.lower()})"
        port = self.subckt.ports[index]
        if port.lower() == self.job.amplifier.out.lower():
            return f"v({NODE_AMP})"
        if port.lower() == (self.job.amplifier.out_n or "").lower():
            return f"v({NODE_AMP_N})"
        if port.lower() == self.job.amplifier.in_p.lower():
            return "v(tb_inp)"
        if port.lower() == self.job.amplifier.in_n.lower():
            return "v(tb_inn)"
        node = bias_node(self.job.bias, port)
        return "0" if node == "0" else f"v({node})"

    @property
    def files(self) -> tuple[Path, ...]:
        """Every file a testbench of this amplifier reads, transitively, for hashing and
        bundling: the netlist's files, the job's includes, the models file and every file
        any of them reads."""
        return self.reads

    def locate_parse_error(self, problem: str) -> str:
        """``problem``, an ngspice parse error, prefixed with the user's file and line to fix
        (:func:`amploop.spice.parse_errors.locate_parse_error`)."""
        from amploop.spice.parse_errors import locate_parse_error

        return locate_parse_error(self, problem)

    def values_in_effect(self, overrides: dict[str, float] | None = None) -> dict[str, float]:
        """Compensation values (SI) the netlist holds, with ``overrides`` applied."""
        values = {role: site.value for role, site in self.sites.items()}
        values.update(overrides or {})
        return values

    def edits(self, values: dict[str, float], params: dict[str, float]) -> tuple[
        dict[tuple[Path, int], str], dict[str, str]
    ]:
        """Text edits that put ``values`` (by role) and corner ``params`` into the netlist.

        Parameters
        ----------
        values
            Compensation values by role, SI (farads, ohms, or the device size).
        params
            The corner's parameter values, SI; those the netlist also defines with a
            global ``.param`` are rewritten there (the corner's value wins).

        Returns
        -------
        edits, instance_params
            ``(file, logical-line index) -> new statement text`` for statements rewritten
            in place, and ``name -> value text`` to add on the subckt's instance line.
        """
        edits: dict[tuple[Path, int], str] = {}
        instance: dict[str, str] = {}
        current: dict[tuple[Path, int], Statement] = {}

        def rewrite(statement: Statement, new_text: str) -> None:
            key = (statement.file, statement.index)
            edits[key] = new_text
            # keep editing the same statement cumulatively (two params on one .param line)
            current[key] = Statement(statement.file, statement.index, statement.line,
                                     tuple(tokenize(new_text)), statement.subckt,
                                     statement.section)

        def latest(statement: Statement) -> Statement:
            return current.get((statement.file, statement.index), statement)

        # corner parameters that the netlist also defines globally: the corner's value wins
        for name, value in params.items():
            found = self.netlist.global_params.get(name.lower())
            if found is not None:
                statement, _ = found
                rewrite(statement, replace_param(latest(statement), name, spice_number(value)))
        for role, value in values.items():
            site = self.sites[role]
            text = spice_number(value)
            if site.kind == "subckt-param":
                instance[site.knob.name] = text
            elif site.kind == "param":
                rewrite(site.statement, replace_param(latest(site.statement), site.knob.name, text))
            elif site.kind == "element":
                for statement in site.statements:
                    rewrite(statement, replace_element_value(latest(statement), text))
            elif site.kind == "device":
                rewrite(site.statement,
                        replace_instance_param(latest(site.statement), site.knob.size, text))
        brk = self.common_mode_break
        if brk is not None:  # its nodes become ports; the probe sits outside
            rewrite(brk.statement, brk.removed_text())
            header = self.subckt.header
            rewrite(header, brk.header_text(latest(header)))
        return edits, instance

    def render(self, values: dict[str, float], params: dict[str, float]) -> tuple[
        str, dict[str, str], list[str]
    ]:
        """The netlist file's text for a testbench, its instance parameters, and notes.

        Parameters
        ----------
        values
            Compensation values by role, SI (farads, ohms, or the device size).
        params
            The corner's parameter values, SI (see :meth:`edits`).
        """
        edits, instance = self.edits(values, params)
        text, notes = render_file(self.netlist, self.netlist.root, edits, top_level=True)
        return text, instance, notes

    def compensated_files(self, values: dict[str, float]) -> dict[Path, str]:
        """Copies of the user's files with ``values`` written in where the netlist keeps them.

        Subckt-header defaults are rewritten in the header; everything else in place.
        Only files that change are returned; they keep their comments and layout except
        on the rewritten lines.

        Parameters
        ----------
        values
            Compensation values by role, SI (farads, ohms, or the device size).
        """
        changed: dict[Path, dict[int, str]] = {}
        for role, value in values.items():
            site = self.sites[role]
            for statement in site.statements:
                self._set_in_copy(changed, site, statement, spice_number(value))
        result: dict[Path, str] = {}
        for file, new_lines in changed.items():
            source = self.netlist.files[file]
            out: list[str] = []
            for index, logical in enumerate(source.lines):
                if index in new_lines:
                    out.append(new_lines[index])
                else:
                    out.extend(logical.raw)
            result[file] = "\n".join(out) + "\n"
        return result

    @staticmethod
    def _set_in_copy(changed: dict[Path, dict[int, str]], site: KnobSite,
                     statement: Statement, text: str) -> None:
        """Write the value ``text`` of ``site`` into ``statement`` among the ``changed``
        lines (file -> line index -> new text), on top of an earlier change to it."""
        lines = changed.setdefault(statement.file, {})
        base = lines.get(statement.index)
        if base is not None:
            statement = Statement(statement.file, statement.index, statement.line,
                                  tuple(tokenize(base)), statement.subckt, statement.section)
        if site.kind in ("subckt-param", "param"):
            lines[statement.index] = replace_param(statement, site.knob.name, text)
        elif site.kind == "element":
            lines[statement.index] = replace_element_value(statement, text)
        else:
            lines[statement.index] = replace_instance_param(statement, site.knob.size, text)


def prepare_amplifier(job: Job, *, allow_control: bool = False) -> Amplifier:
    """Read the job's netlist and check it against the job.

    Parameters
    ----------
    job
        The loaded job.
    allow_control
        Accept ``.control`` blocks in the user's files (they can run shell commands).

    Raises
    ------
    NetlistError
        The subckt is missing, a port named in the job is not a port of the subckt, a port
        is left unconnected, a compensation parameter, element or device does not exist,
        or a file holds a ``.control`` block and ``allow_control`` is False.
    """
    netlist = read_netlist(job.amplifier.netlist)
    inlined = frozenset(netlist.files)  # the testbench writes these into the deck as text
    for include in job.amplifier.includes:
        netlist.files.setdefault(include, read_source(include))
    sections = tuple(dict.fromkeys(c.lib for c in job.corners if c.lib is not None))
    reads = files_read(netlist, includes=job.amplifier.includes, models=job.amplifier.models,
                       sections=sections, inlined=inlined)
    user_deck = read_user_deck(job) if job.testbench is not None else None
    commands = list(reads.commands) + list(user_deck.commands if user_deck else ())
    if commands and not allow_control:
        path, line, what = commands[0]
        raise NetlistError(
            f"holds {what}", file=path, place=line,
            hint="remove it (amploop runs its own analyses), or pass --allow-control if you "
            "wrote it and trust it",
        )
    subckt = netlist.subckt(job.amplifier.subckt)
    _check_ports(job, subckt)
    _check_named_devices(job, subckt)
    params = {**{k: v for k, v in subckt.params.items()}}
    global_exprs = {name: expr for name, (_, expr) in netlist.global_params.items()}
    local = subckt.local_params()
    sites = {}
    for role, knob in job.compensation.items():
        sites[role] = locate_knob(job, netlist, subckt, knob, global_exprs, params, local)
    device, warnings = None, []
    rc_site = sites.get("rc")
    if rc_site is not None and rc_site.kind == "device":
        device, warning = device_site(job, subckt, rc_site, {**global_exprs, **params})
        if warning:
            warnings.append(warning)
    files = tuple(dict.fromkeys(reads.files + (user_deck.reads if user_deck else ())))
    return Amplifier(job=job, netlist=netlist, subckt=subckt, sites=sites,
                     reads=files, device=device, warnings=tuple(warnings),
                     common_mode_break=locate_common_mode_break(job, subckt),
                     user_deck=user_deck)


def _check_named_devices(job: Job, subckt: Subckt) -> None:
    """``input_device`` and ``second_stage_device`` name MOSFETs of the subckt (a name with
    a dot is inside a nested instance and is left to the simulator)."""
    mosfets = [s.tokens[0] for s in subckt.elements() if s.keyword.startswith("m")]
    for role in ("input_device", "second_stage_device"):
        name = getattr(job.amplifier, role)
        if not name or "." in name:
            continue
        if subckt.element(name) is None or not name.lower().startswith("m"):
            raise NetlistError(
                f"{name!r} is not a MOSFET of subckt {subckt.name} (its MOSFETs: "
                f"{' '.join(mosfets) or 'none'})" + closest_names(name, mosfets),
                file=job.path, place=f"[amplifier].{role}")


def _check_ports(job: Job, subckt: Subckt) -> None:
    named = {
        "[amplifier].in_p": job.amplifier.in_p,
        "[amplifier].in_n": job.amplifier.in_n,
        "[amplifier].out": job.amplifier.out,
    }
    if job.amplifier.out_n is not None:
        named["[amplifier].out_n"] = job.amplifier.out_n
    named.update({f"[bias].{s.port}": s.port for s in job.bias.sources})
    own_testbench = job.testbench is not None  # the user's deck connects the ports
    used: dict[str, str] = {}
    for place, port in named.items():
        if subckt.port_index(port) is None:
            raise NetlistError(
                f"{port!r} is not a port of subckt {subckt.name} (ports: {' '.join(subckt.ports)})"
                + closest_names(port, subckt.ports),
                file=job.path, place=place,
            )
        if port.lower() in used:
            raise NetlistError(f"port {port!r} is connected twice (also in {used[port.lower()]})",
                               file=job.path, place=place)
        used[port.lower()] = place
    for port in () if own_testbench else subckt.ports:
        if port.lower() not in used:
            raise NetlistError(
                f"port {port!r} of subckt {subckt.name} is not connected",
                file=job.path, place="[bias]",
                hint=f'give it a source, e.g. {port} = {{ volts = "0" }}',
            )


