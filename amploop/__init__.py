"""amploop: loop-gain measurement and Miller-compensation tuning with ngspice.

Results are only as good as the device models they were simulated with; sign-off
stays with the designer's own models, flow and foundry rules.
"""

__version__ = "0.1.0"
