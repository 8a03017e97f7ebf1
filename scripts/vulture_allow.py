"""Names vulture reports as unused in amploop/ that are used, in ways it cannot see.

scripts/test passes this file to vulture beside amploop/; it is never imported or run.
Each entry names what is used, and where and by whom.
"""

from types import SimpleNamespace

_ = SimpleNamespace()

_.allowed = (
    _.__getattr__,  # amploop/__init__.py: Python calls a module's __getattr__ (lazy exports)
    _._loc,  # amploop/report/summary.py: matplotlib's table cell reads it to align its text
    _.started_workers,  # amploop/sim/pool.py: the fault tests count the workers a pool started
    _.dc_path,  # amploop/spec/model.py: read by name, feedback("dc_path"), in the testbench
    _.to_dataframe,  # corners/results.py, strategy/tune.py: public API for notebook users
    _.to_frd,  # corners/results.py, strategy/tune.py: public API (python-control FRD objects)
    _.settling_corner,  # strategy/mapsolve.py: set by name (_settling_of), read in results.json
)
