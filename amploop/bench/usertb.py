"""The designer's own closed-loop testbench, with the loop's break marked: text in, text out.

With ``[testbench]`` amploop does not write its own feedback network: it takes the user's
deck (its title line, analyses and other run commands left out; its elements, parameters
and options kept), sets the compensation values on its instance of the amplifier (renamed
``X1``, the name the rest of the testbench reads devices by), and replaces each break
source ``Vbrk a b 0`` by two 0 V links, ``a`` to ``tb_out`` and ``tb_fb`` to ``b``, so
that the same probe as in amploop's own testbench sits between ``tb_out`` and ``tb_fb``.
The deck's own includes of files amploop includes itself (the amplifier's netlist, the
models file, ``[amplifier].includes``) and its ``.temp`` are left out: amploop writes them
for each corner.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from amploop.bench.cmbreak import zero_volt_source
from amploop.bench.nodes import NODE_AMP, NODE_AMP_N, NODE_FEEDBACK, NODE_FEEDBACK_N
from amploop.errors import NetlistError
from amploop.spec.model import Job
from amploop.spice.deckfiles import files_read
from amploop.spice.lexer import is_assignment, split_params_prefix, tokenize
from amploop.spice.netlist import Netlist, read_netlist
from amploop.spice.rewrite import render_file, replace_instance_param, replace_param
from amploop.spice.source import Statement, assignments, include_target
from amploop.spice.units import spice_number

__all__ = ["UserDeck", "read_user_deck"]

_GROUND = {"0", "gnd"}


@dataclass(frozen=True)
class UserDeck:
    """The user's testbench deck, read and checked.

    Attributes
    ----------
    netlist
        The deck as read, with the files it includes.
    breaks
        The break sources, the first output's first.
    instance
        Its instance of the amplifier's subckt.
    reads
        Every file the deck makes ngspice read, transitively.
    commands
        ``(file, line, what)`` of each line in those files that runs commands
        (:func:`~amploop.spice.deckfiles.files_read`).
    """

    netlist: Netlist
    breaks: tuple[Statement, ...]
    instance: Statement
    reads: tuple[Path, ...]
    commands: tuple = ()

    def render(self, instance_params: dict[str, str], own_files: set[Path],
               corner_params: dict[str, float], extra_ports: tuple[str, ...] = ()
               ) -> tuple[str, list]:
        """The deck's text for a testbench, and notes on what was left out.

        Parameters
        ----------
        instance_params
            Subckt parameters to set on the amplifier's instance (name -> value text).
        own_files
            Files the testbench includes itself (absolute, resolved): the deck's own
            includes of them are left out.
        corner_params
            The corner's parameters (SI): where the deck's own ``.param`` lines set one of
            them, the corner's value is written there (it would win otherwise).
        extra_ports
            Nodes the instance gains before its subckt name (the sides of a common-mode
            break brought out of the subckt).
        """
        root = self.netlist.root
        edits: dict[tuple[Path, int], str] = {}
        first = self.netlist.files[root].lines[0]
        edits[(root, 0)] = "\n".join(f"* title of {root.name}: {raw}" for raw in first.raw)
        for number, statement in enumerate(self.breaks):
            amp, fb = (NODE_AMP, NODE_FEEDBACK) if number == 0 else (NODE_AMP_N, NODE_FEEDBACK_N)
            suffix = "" if number == 0 else "_n"
            a, b = statement.tokens[1], statement.tokens[2]
            edits[(statement.file, statement.index)] = (
                f"* amploop: {statement.tokens[0]} ({a} -> {b}) is the loop's break: the probe "
                f"sits between {amp} and {fb}\n"
                f"Vtb_link_a{suffix} {a} {amp} dc 0\nVtb_link_b{suffix} {fb} {b} dc 0")
        tokens = list(self.instance.tokens)
        at = next(i for i in range(len(tokens) - 1, 0, -1)
                  if tokens[i].lower() == _instance_of(self.instance))
        tokens[at:at] = list(extra_ports)
        instance = Statement(self.instance.file, self.instance.index, self.instance.line,
                             ("X1", *tokens[1:]), None, None)
        text = " ".join(instance.tokens)
        for name, value in instance_params.items():
            text = replace_instance_param(instance, name, value)
            instance = Statement(instance.file, instance.index, instance.line,
                                 tuple(tokenize(text)), None, None)
        edits[(self.instance.file, self.instance.index)] = text
        notes = []
        for statement in self.netlist.files[root].statements:
            if statement.keyword == ".param" and statement.subckt is None:
                text = " ".join(statement.tokens)
                for name, value in corner_params.items():
                    if any(k.lower() == name for k, _ in assignments(statement.tokens[1:])):
                        text = replace_param(Statement(statement.file, statement.index,
                                                       statement.line, tuple(tokenize(text)),
                                                       None, None), name, spice_number(value))
                if text != " ".join(statement.tokens):
                    edits[(statement.file, statement.index)] = text
            target = include_target(statement)
            dropped = (target is not None and target[0] in own_files) or \
                statement.keyword == ".temp"
            if dropped and statement.subckt is None and statement.index != 0:
                edits[(statement.file, statement.index)] = (
                    f"* amploop writes this itself for each corner: {' '.join(statement.tokens)}")
                notes.append(f"{root}:{statement.line}: {statement.tokens[0]} left out (amploop "
                             "writes it for each corner)")
        text, more = render_file(self.netlist, root, edits, top_level=True, keep_elements=True)
        return text, notes + more


def read_user_deck(job: Job) -> UserDeck:
    """The ``[testbench]`` deck of ``job`` (a loaded job with one), with its break sources
    and its instance of the amplifier's subckt found and checked.

    Parameters
    ----------
    job
        A loaded job with a ``[testbench]`` table.

    Raises
    ------
    NetlistError
        A break that is not an element of the deck's top level, not a voltage source, not
        0 V, or that ties a node to ground; no instance, or more than one, of the subckt;
        another element already called X1.
    """
    spec = job.testbench
    netlist = read_netlist(spec.netlist)
    reads = files_read(netlist)
    top = [s for s in netlist.files[netlist.root].statements
           if s.subckt is None and s.section is None and s.index != 0]
    breaks = tuple(_break(job, top, name, i) for i, name in enumerate(spec.breaks))
    subckt = job.amplifier.subckt.lower()
    instances = [s for s in top if s.keyword.startswith("x") and _instance_of(s) == subckt]
    where = f"{spec.netlist.name}"
    if len(instances) != 1:
        raise NetlistError(f"the testbench {where} holds {len(instances)} instances of subckt "
                           f"{job.amplifier.subckt}; amploop sets the values on one",
                           file=job.path, place="[testbench].netlist")
    instance = instances[0]
    if instance.keyword != "x1" and any(s.keyword == "x1" for s in top):
        raise NetlistError(f"the testbench already has an X1, and amploop names the "
                           f"amplifier's instance ({instance.tokens[0]}) X1",
                           file=instance.file, place=instance.line,
                           hint="rename that other X1")
    return UserDeck(netlist=netlist, breaks=breaks, instance=instance, reads=reads.files,
                    commands=tuple(reads.commands))


def _instance_of(statement: Statement) -> str:
    """The subckt name (lower case) of the instance line ``statement``: its last token
    before the parameters."""
    names = [t for t in statement.tokens[1:] if t.lower() != "params:"
             and not is_assignment(split_params_prefix(t)[1])]
    return names[-1].lower() if names else ""


def _break(job: Job, top: list[Statement], name: str, number: int) -> Statement:
    """The break source ``name`` (the ``number``-th of ``[testbench].break``) among the
    deck's top-level statements ``top``, checked."""
    place = "[testbench].break" + (f"[{number}]" if len(job.testbench.breaks) > 1 else "")
    statement = next((s for s in top if s.keyword == name.lower()), None)
    statement = zero_volt_source(statement, name, top, "the testbench's top level", "the loop",
                                 job, place)
    where = f"{statement.file.name}:{statement.line}"
    a, b = statement.tokens[1], statement.tokens[2]
    if a.lower() in _GROUND or b.lower() in _GROUND or a.lower() == b.lower():
        raise NetlistError(f"{statement.tokens[0]} ({where}) must sit on the loop, between "
                           "two nodes other than ground", file=job.path, place=place)
    return statement
