"""The one error hierarchy of amploop.

Every error amploop raises on purpose derives from :class:`AmploopError` and carries
the file, the place in it and the problem, so that the command line can print one
line and exit; the mapping to exit codes lives in :mod:`amploop.cli` alone.
"""

from __future__ import annotations

import difflib
from pathlib import Path

__all__ = [
    "SIMULATOR_KINDS",
    "AmploopError",
    "JobError",
    "JournalError",
    "MeasurementError",
    "NetlistError",
    "OutputError",
    "SimulatorError",
    "TuningError",
    "did_you_mean",
]


class AmploopError(Exception):
    """Root of amploop's errors.

    Parameters
    ----------
    problem
        What is wrong, in one sentence.
    file
        The file the problem is in, if any.
    place
        Where in the file: a line number, or a TOML key path such as ``[feedback].kind``.
    hint
        What to do about it, if there is something useful to say.
    """

    def __init__(
        self,
        problem: str,
        *,
        file: str | Path | None = None,
        place: str | int | None = None,
        hint: str | None = None,
    ) -> None:
        self.problem = problem
        self.file = None if file is None else str(file)
        self.place = None if place is None else str(place)
        self.hint = hint
        super().__init__(str(self))

    def __str__(self) -> str:
        where = ":".join(part for part in (self.file, self.place) if part)
        text = f"{where}: {self.problem}" if where else self.problem
        if self.hint:
            text += f" ({self.hint})"
        return one_line(text)


def one_line(text: object) -> str:
    """``text`` (a message, a path, a name) with control characters and line breaks
    escaped, so that a message that quotes it stays one line: the one escaping helper."""
    text = str(text)
    if text.isprintable():
        return text
    return "".join(ch if ch.isprintable() else repr(ch)[1:-1] for ch in text)


class JobError(AmploopError):
    """The job file is missing, malformed, or names something that does not exist."""


class NetlistError(AmploopError):
    """The user's netlist (or a file it includes) cannot be used as asked."""


#: What can go wrong with an analysis (:attr:`SimulatorError.kind`): ngspice refused the
#: deck; found no solution (no DC operating point, a singular matrix, a time step too
#: small); ran past its time limit (or got no answer in time); its process died; anything
#: else.
SIMULATOR_KINDS = ("parse", "convergence", "timeout", "crash", "failed")


class SimulatorError(AmploopError):
    """ngspice failed on an analysis: parse error, no DC solution, crash or time-out.

    Parameters
    ----------
    problem, file, place, hint
        As for :class:`AmploopError`.
    kind
        Which failure it is, one of :data:`SIMULATOR_KINDS`, set where it is raised, so
        that callers decide by it and never by the wording of ``problem``.
    """

    def __init__(self, problem: str, *, file: str | Path | None = None,
                 place: str | int | None = None, hint: str | None = None,
                 kind: str = "failed") -> None:
        if kind not in SIMULATOR_KINDS:
            raise ValueError(f"unknown SimulatorError kind {kind!r}")
        self.kind = kind
        super().__init__(problem, file=file, place=place, hint=hint)

    def __reduce__(self):
        # rebuilt from its parts when it travels between processes (pickle), kind included
        return _rebuild_simulator_error, (self.problem, self.file, self.place, self.hint,
                                          self.kind)


def _rebuild_simulator_error(problem, file, place, hint, kind) -> SimulatorError:
    return SimulatorError(problem, file=file, place=place, hint=hint, kind=kind)


class MeasurementError(AmploopError):
    """The simulation ran but its loop gain cannot be read (e.g. never crosses 0 dB)."""


class TuningError(AmploopError):
    """A tuning strategy cannot proceed with what it was given."""


class JournalError(AmploopError):
    """The journal database of an out folder is locked, corrupt or from another version."""


class OutputError(AmploopError):
    """The out folder cannot be written (permissions, disk full)."""


def did_you_mean(name: str, choices) -> str:
    """``"; did you mean 'x'?"`` when one of ``choices`` is close to ``name``, else a list of
    the choices (when there are 12 at most; else nothing)."""
    choices = list(dict.fromkeys(choices))
    lowered = {c.lower(): c for c in choices}
    close = difflib.get_close_matches(name.lower(), list(lowered), n=3, cutoff=0.5)
    if close:
        def ratio(candidate: str) -> float:
            return difflib.SequenceMatcher(None, name.lower(), candidate).ratio()

        best = [c for c in close if ratio(c) == ratio(close[0])][:2]  # a tie: name both
        return "; did you mean " + " or ".join(repr(lowered[c]) for c in best) + "?"
    if choices and len(choices) <= 12:
        return "; choices: " + ", ".join(repr(c) for c in choices)
    return ""
