"""amploop: loop-gain measurement and Miller-compensation tuning with ngspice.

Results are only as good as the device models they were simulated with; sign-off
stays with the designer's own models, flow and foundry rules.

The stages, in the order data flows (each imports only those before it):
``spice`` (SPICE text), ``spec`` (the job), ``analysis`` (pure maths on arrays),
``bench`` (testbench and probe), ``sim`` (ngspice, workers, cluster, journal),
``corners`` (a measurement over the corners), ``strategy`` (tuning), ``report``, ``cli``.

For a notebook::

    import amploop
    job = amploop.load_job("netlists/demo/job.toml")
    result = amploop.measure(job)
"""

from __future__ import annotations

from importlib import import_module
from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("amploop")
except PackageNotFoundError:  # run from a source tree that is not installed
    __version__ = "0+unknown"

#: Public names, and the module each comes from (imported on first use, so that
#: ``import amploop`` stays quick and pulls in neither matplotlib nor PySpice).
_EXPORTS = {
    "load_job": "amploop.spec.job",
    "Job": "amploop.spec.model",
    "measure": "amploop.corners.measure",
    "MeasureResult": "amploop.corners.results",
    "CornerResult": "amploop.corners.results",
    "tune": "amploop.strategy.tune",
    "TuneResult": "amploop.strategy.tune",
    "build_report": "amploop.report",
    "AmploopError": "amploop.errors",
}

__all__ = ["AmploopError", "CornerResult", "Job", "MeasureResult", "TuneResult", "__version__",
           "build_report", "load_job", "measure", "tune"]


def __getattr__(name: str):
    if name in _EXPORTS:
        return getattr(import_module(_EXPORTS[name]), name)
    raise AttributeError(f"module 'amploop' has no attribute {name!r}")
