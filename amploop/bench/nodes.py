"""The testbench's node names: the two sides of the loop-gain probe, and the top-level
node each subckt port is tied to (every name the testbench adds starts with ``tb_``)."""

from __future__ import annotations

__all__ = ["NODE_AMP", "NODE_FEEDBACK", "port_node"]

#: Amplifier side of the probe: the subckt's output with the load.
NODE_AMP = "tb_out"
#: Feedback side of the probe: where the feedback network meets the output.
NODE_FEEDBACK = "tb_fb"


def port_node(port: str) -> str:
    """Top-level node name the testbench gives the subckt port ``port``."""
    return "tb_" + "".join(ch if ch.isalnum() or ch == "_" else "_" for ch in port.lower())
