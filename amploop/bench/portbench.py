"""One analysis per corner that characterises the compensation at its ports.

The corner's own testbench at reference values (Rc0, Cc0), with an AC current source of
DC 0 across each compensation port added inside the amplifier's subckt (so the operating
point is the testbench's own), runs the probe's two runs, then one run per port with
only that port's source on (:mod:`amploop.analysis.portmap`). All of them run in one
loaded circuit, one request: one journal entry. The first two runs are the testbench's
own analysis at the reference values, read as such.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from amploop.analysis.portmap import PortMap
from amploop.bench.amplifier import Amplifier
from amploop.bench.branch import INSTANCE, CompensationBranch
from amploop.bench.requests import AnalysisOutput, AnalysisRequest, Step
from amploop.bench.testbench import Testbench, save_line

__all__ = ["PortCharacterisation", "port_ports"]

_SOURCE = "Iamploop_port{}"


def port_ports(branch: CompensationBranch, form: str, amplifier: Amplifier
               ) -> list[tuple[str, str]]:
    """The (first, second) subckt nodes of each port of ``form``: Rc's then Cc's for
    ``"two-element"``, the series branch's outer nodes for ``"one-impedance"``, Cc's for
    ``"cc-only"``; the elements named in ``branch``, read from ``amplifier``'s subckt."""
    cc = amplifier.subckt.element(branch.cc_element)
    cc_nodes = (cc.tokens[1].lower(), cc.tokens[2].lower())
    if form == "cc-only":
        return [cc_nodes]
    rc = amplifier.subckt.element(branch.rc_element)
    rc_nodes = (rc.tokens[1].lower(), rc.tokens[2].lower())
    if form == "two-element":
        return [rc_nodes, cc_nodes]
    outer_rc = next(n for n in rc_nodes if n != branch.middle)
    outer_cc = next(n for n in cc_nodes if n != branch.middle)
    return [(outer_rc, outer_cc)]


def _with_sources(deck: str, subckt: str, ports: list[tuple[str, str]]) -> str:
    """``deck`` with one ``I`` source (DC 0, AC 0) per port added before the ``.ends`` of
    the definition of ``subckt``."""
    lines = deck.splitlines()
    depth, inside = 0, False
    for index, line in enumerate(lines):
        words = line.split()
        if not words:
            continue
        key = words[0].lower()
        if key == ".subckt":
            if not inside and len(words) > 1 and words[1].lower() == subckt.lower():
                inside, depth = True, 0
            elif inside:
                depth += 1
        elif key == ".ends" and inside:
            if depth == 0:
                sources = [f"{_SOURCE.format(i + 1)} {p} {q} dc 0 ac 0"
                           for i, (p, q) in enumerate(ports)]
                return "\n".join(lines[:index] + sources + lines[index:]) + "\n"
            depth -= 1
    raise ValueError(f"no definition of subckt {subckt} in the deck")


@dataclass(frozen=True)
class PortCharacterisation:
    """A corner's port characterisation: the request and how to read its answer.

    Attributes
    ----------
    bench
        The corner's testbench at the reference values.
    form
        The port map's form (:class:`~amploop.analysis.portmap.PortMap`).
    ports
        (first, second) subckt nodes of each port.
    """

    bench: Testbench
    form: str
    ports: tuple[tuple[str, str], ...]

    def _vectors(self, amplifier: Amplifier) -> list[tuple[str, str]]:
        return [(amplifier.node_vector(p), amplifier.node_vector(q)) for p, q in self.ports]

    def request(self, amplifier: Amplifier, time_limit_s: float) -> AnalysisRequest:
        """The request: the probe's two runs (reading the port voltages too), then one run
        per port source, then the testbench's operating-point read-out; node names from
        ``amplifier``, hung after ``time_limit_s`` seconds."""
        steps = list(self.bench.steps)
        op_step = steps.pop()
        extra = tuple(dict.fromkeys(v for pair in self._vectors(amplifier) for v in pair
                                    if v != "0"))
        runs = [i for i, step in enumerate(steps) if step.is_ac]
        if len(runs) != 2:
            raise ValueError("a port characterisation needs the double-injection probe")
        reads = tuple(dict.fromkeys(r for i in runs for r in steps[i].read if r != "frequency"))
        for i in runs:
            steps[i] = replace(steps[i], read=tuple(dict.fromkeys(steps[i].read + extra)))
        ac_command = steps[runs[0]].command
        off = [step.command for step in steps if step.command.startswith("alter")]
        last = off[-1].replace("acmag=1", "acmag=0")  # the second run's source, off
        steps.append(Step(last))
        for i in range(len(self.ports)):
            name = f"i.{INSTANCE}.{_SOURCE.format(i + 1).lower()}"
            if i:
                steps.append(Step(f"alter i.{INSTANCE}.{_SOURCE.format(i).lower()} acmag=0"))
            steps.append(Step(f"alter {name} acmag=1"))
            steps.append(Step(ac_command, ("frequency", *reads, *extra)))
        steps.append(op_step)
        deck = _with_sources(self.bench.deck, amplifier.subckt.name, list(self.ports))
        deck = "\n".join(save_line(tuple(steps)) if line.startswith(".save ") else line
                         for line in deck.splitlines()) + "\n"
        return AnalysisRequest(label=f"{self.bench.label} (ports)", deck=deck,
                               steps=tuple(steps), time_limit_s=time_limit_s)

    def bench_output(self, output: AnalysisOutput) -> AnalysisOutput:
        """The testbench's own analysis within ``output``: its steps' reads."""
        n = len(self.bench.steps)
        return replace(output, reads=output.reads[: n - 1] + (output.reads[-1],))

    def port_map(self, amplifier: Amplifier, output: AnalysisOutput) -> PortMap:
        """The corner's :class:`PortMap` from the finished analysis ``output`` of
        :meth:`request` (with the same ``amplifier``)."""
        request_steps = self.request(amplifier, 1.0).steps
        runs = [output.reads[i] for i, step in enumerate(request_steps) if step.is_ac]
        vectors = self._vectors(amplifier)

        def port_voltages(run: dict) -> np.ndarray:
            def node(name: str):
                return 0.0 if name == "0" else run[name]
            return np.stack([node(p) - node(q) for p, q in vectors])

        first = [s for s in self.bench.steps if s.is_ac]
        y_names = [first[0].read[-1], first[1].read[-1]]  # v(b), the series current
        a = np.stack([port_voltages(runs[0]), port_voltages(runs[1])])
        c = np.stack([runs[0][y_names[0]], runs[1][y_names[1]]])
        b = np.stack([port_voltages(run) for run in runs[2:]], axis=1)
        d = np.stack([np.stack([run[name] for run in runs[2:]]) for name in y_names])
        values = self.bench.values
        return PortMap(frequency_hz=np.real(runs[0]["frequency"]), form=self.form,
                       reference=(values["cc"], values.get("rc", 0.0)), a=a, b=b, c=c, d=d)
