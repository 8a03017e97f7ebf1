"""The testbench's node names: the two sides of the loop-gain probe, and the top-level
node each subckt port is tied to (every name the testbench adds starts with ``tb_``)."""

from __future__ import annotations

__all__ = ["NODE_AMP", "NODE_AMP_N", "NODE_CM_DRIVE", "NODE_CM_DRIVEN", "NODE_FEEDBACK",
           "NODE_FEEDBACK_N", "port_node"]

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
