"""What the simulation stage is asked to run and what it gives back.

An analysis is a deck (netlist text) plus a list of simulator commands, each with the
vectors to read from the plot it makes; the testbench stage builds them, the simulation
stage (:mod:`amploop.sim`) runs them and answers with an :class:`AnalysisOutput`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["AnalysisOutput", "AnalysisRequest", "Step"]

_ANALYSES = {"ac", "op", "tran", "dc", "noise", "tf", "pz", "sens", "disto"}


@dataclass(frozen=True)
class Step:
    """One simulator command and the vectors to read from the plot it makes.

    Attributes
    ----------
    command
        An ngspice command: ``"ac dec 40 1 10G"``, ``"alter vtb_series acmag=0"``, ``"op"``.
    read
        Vector names as ngspice knows them in that plot: ``"frequency"``, ``"v(tb_out)"``,
        ``"i(vtb_series)"``, ``"@m.x1.m1[gm]"``.
    optional
        For a command that is not an analysis: its rejection, or a vector it cannot find,
        leaves out what it could not read instead of failing the analysis (the
        operating-point read-out after the loop gain, where a model may lack a quantity).
    """

    command: str
    read: tuple[str, ...] = ()
    optional: bool = False

    @property
    def is_analysis(self) -> bool:
        return self.command.split()[0].lower() in _ANALYSES

    @property
    def is_ac(self) -> bool:
        return self.command.split()[0].lower() == "ac"


@dataclass(frozen=True)
class AnalysisRequest:
    """Everything a worker needs to run one analysis.

    Attributes
    ----------
    label
        For messages: the corner (and point) this analysis belongs to.
    deck
        Netlist text: a title line first, ``.end`` last, no ``.control`` block.
    steps
        The commands to send after loading it.
    time_limit_s
        Wall-clock seconds after which the analysis counts as hung.
    files
        Contents of files the deck includes, by the path the deck uses, for workers that
        do not share the file system (empty for local workers).
    after
        Optional work for the worker once the analysis has succeeded: a picklable
        callable taking the :class:`AnalysisOutput` and returning a small picklable
        value, which comes back as ``AnalysisOutput.after``. It is not part of the
        analysis: it never changes a journal key and is never recorded.
    """

    label: str
    deck: str
    steps: tuple[Step, ...]
    time_limit_s: float = 120.0
    files: tuple[tuple[str, str], ...] = ()
    after: object = field(default=None, compare=False, repr=False)

    @property
    def ac_runs(self) -> int:
        return sum(step.is_ac for step in self.steps)


@dataclass(frozen=True)
class AnalysisOutput:
    """What a finished analysis gives back.

    Attributes
    ----------
    reads
        One dict per step: vector name -> numpy array (complex for AC, float otherwise).
    warnings
        Simulator messages worth showing the user (transient-op fallback, gmin stepping).
    transient_op
        True when the operating point needed ngspice's transient fallback.
    seconds
        Wall time of the analysis inside ngspice.
    cpu_seconds
        CPU time of the worker process during the analysis (ngspice's own work; not
        recorded in the journal).
    after
        What the request's ``after`` returned in the worker (None: no such work, or it
        failed; the caller then does the work itself).
    messages
        Every line ngspice printed while loading the deck and running its steps.
    """

    reads: tuple[dict[str, np.ndarray], ...]
    warnings: tuple[str, ...] = ()
    transient_op: bool = False
    seconds: float = 0.0
    cpu_seconds: float = field(default=0.0, compare=False)
    messages: tuple[str, ...] = field(default=(), repr=False)
    after: object = field(default=None, repr=False)
