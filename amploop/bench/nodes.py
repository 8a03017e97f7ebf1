"""The testbench's node names: the two sides of the loop-gain probe, and the top-level
node each subckt port is tied to (every name the testbench adds starts with ``tb_``; a
supply port held at exactly 0 V is tied to ground itself)."""

from __future__ import annotations

from amploop.spice.units import parse_value

__all__ = ["NODE_AMP", "NODE_AMP_N", "NODE_CM_DRIVE", "NODE_CM_DRIVEN", "NODE_FEEDBACK",
           "NODE_FEEDBACK_N", "bias_node", "port_node"]

#: Amplifier side of the probe: the subckt's output with the load.
NODE_AMP = "tb_out"
#: Feedback side of the probe: where the feedback network meets the output.
NODE_FEEDBACK = "tb_fb"
#: The same two sides at the second output of a fully-differential amplifier.
NODE_AMP_N = "tb_outn"
NODE_FEEDBACK_N = "tb_fbn"
#: The two sides of the common-mode loop's break, brought out of the subckt: the node
#: that drives it (the first node of the user's 0 V source) and the node it drives.
NODE_CM_DRIVE = "tb_cma"
NODE_CM_DRIVEN = "tb_cmb"


def port_node(port: str) -> str:
    """Top-level node name the testbench gives the subckt port ``port``."""
    return "tb_" + "".join(ch if ch.isalnum() or ch == "_" else "_" for ch in port.lower())


def bias_node(bias, port: str) -> str:
    """Top-level node of a subckt port in the testbench: ground, ``"0"``, when ``[bias]``
    holds it at a voltage written as a number equal to 0 V, else :func:`port_node`.

    Parameters
    ----------
    bias
        The job's ``[bias]`` (a :class:`amploop.spec.model.Bias`).
    port
        The subckt port, as the netlist spells it (compared without case).

    Tying a 0 V supply to ground rather than through a 0 V source is the same circuit, and
    it takes the supply's node out of ngspice's matrix. In an extracted netlist every
    parasitic capacitor to the substrate lands on that node; as a row of its own it holds
    one entry per capacitor, and building and ordering the matrix then grows with the
    square of their number (measured: an operating point of 27 s at 60,000 wire nodes,
    0.27 s with the supply at ground; ``scripts/bench_layout.py``).
    """
    for source in bias.sources:
        if source.port.lower() == port.lower() and source.kind == "volts":
            try:
                zero = parse_value(source.value.strip()) == 0.0
            except ValueError:  # an expression: its value is the corner's business
                zero = False
            return "0" if zero else port_node(port)
    return port_node(port)
