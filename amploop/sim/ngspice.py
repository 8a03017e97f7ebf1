"""The only place that talks to ngspice: one shared-library session per process.

An analysis is a deck (netlist text) plus a list of simulator commands, each with the
vectors to read from the plot it makes. :class:`NgspiceSession` loads the deck through
PySpice's binding of ngspice's shared library, sends the commands itself and reads
ngspice's own messages to decide whether each step worked (PySpice's built-in check
treats every non-warning message on stderr as an error, which makes a healthy circuit
that needed gmin stepping look like a failed one). After every analysis it frees the
circuit and its plots, so a worker can run thousands of analyses without growing.

Known simulator behaviour handled here (ngspice 39):

- ``set num_threads=1`` before any circuit: Debian's build uses OpenMP, and an idle
  second thread busy-waits (2 processes on 2 cores ran 15–30x slower).
- A parse error leaves the library unable to recover ("cannot recover and awaits to be
  detached"); the session is then marked broken and its process must be replaced.
- A floating node shows as "singular matrix" and gmin stepping then "succeeds" with
  arbitrary values: an error.
- An operating point found only by the transient fallback ("Transient op") is reported:
  it depends slightly on the capacitors, so compensation changes move it.
"""

from __future__ import annotations

import logging
import re

import numpy as np

from amploop.bench.requests import AnalysisOutput, AnalysisRequest, Step
from amploop.errors import SimulatorError

__all__ = ["NgspiceSession", "failure_kind", "summarise_failure"]


# ngspice messages that mean the step failed, whatever the rest says
_FATAL = [
    re.compile(p, re.IGNORECASE)
    for p in (
        r"^\s*error",
        r"singular matrix",
        r"simulation\(s\) aborted",
        r"operating point failed",
        r"dc solution failed",
        r"timestep too small",
        r"cannot recover",
        r"no such (device|vector|parameter)",
        r"unknown (subckt|model|parameter)",
        r"undefined parameter",
        r"can't find model",
        r"could not find",
    )
]
_TRANSIENT_OP = re.compile(r"transient op started", re.IGNORECASE)
_TRANSIENT_OP_WARNING = ("operating point found only by ngspice's transient fallback; "
                         "it may move with the compensation values")
# ngspice messages of an analysis that found no solution (its kind "convergence")
_NO_SOLUTION = re.compile(
    r"singular matrix|operating point failed|dc solution failed|timestep too small"
    r"|gmin stepping failed|source stepping failed|iteration limit reached", re.IGNORECASE)


def _fatal(lines: list[str]) -> bool:
    """Whether any of ngspice's messages ``lines`` means the step failed."""
    return any(p.search(line) for line in lines for p in _FATAL)


def failure_kind(lines: list[str]) -> str:
    """The :attr:`~amploop.errors.SimulatorError.kind` of an analysis step that failed with
    ngspice's messages ``lines``: ``"convergence"`` when they say it found no solution (no
    DC operating point, a singular matrix, a time step too small), else ``"failed"``."""
    return "convergence" if any(_NO_SOLUTION.search(line) for line in lines) else "failed"


#: Longest echo of a deck line kept in a failure's summary, characters (a BSIM4 instance
#: line, flattened with all its parameters, runs to hundreds).
ECHO_CHARS = 72


def _echo(line: str) -> str:
    """A deck line as ngspice echoed it, cut at a word to about :data:`ECHO_CHARS`."""
    line = " ".join(line.split())
    if len(line) <= ECHO_CHARS:
        return line
    cut = line.rfind(" ", 0, ECHO_CHARS)
    return line[: cut if cut > 0 else ECHO_CHARS].rstrip(" .") + " …"


def _model_issue(text: list[str]) -> str | None:
    """ngspice's own note on a model card it refused ("Model issue on line N :", the card,
    then the note, such as the MOS levels this binary supports), when an element then
    failed for want of that model; None otherwise."""
    joined = " ".join(text).lower()
    if "valid modelname" not in joined and "find model" not in joined:
        return None
    for i, line in enumerate(text[:-2]):
        issue = re.search(r"model issue on line (\d+)", line, re.IGNORECASE)
        if issue is None:
            continue
        card = text[i + 1].split()
        if len(card) < 2 or card[0].lower() != ".model":
            continue
        level = re.search(r"\blevel\s*=\s*([^\s.]+)", text[i + 1], re.IGNORECASE)
        what = f"model {card[1]}" + (f" (level={level.group(1)})" if level else "")
        rejected = next((text[j + 1] for j in range(i + 2, len(text) - 1)
                         if text[j].lower().startswith("error on line")), None)
        tail = f"; rejected: {_echo(rejected).split()[0]}" if rejected else ""
        return f"{what} on line {issue.group(1)}: {text[i + 2]}{tail}"
    return None


def summarise_failure(lines: list[str]) -> str:
    """One line naming what went wrong, from ngspice's messages ``lines``: ngspice's own
    words, with the deck lines it echoes cut short and, for a model card it refused, its
    note on why (the model levels it supports) rather than the element that missed it."""
    text = [line.strip() for line in lines if line.strip()]
    joined = " ".join(text).lower()
    issue = _model_issue(text)
    if issue is not None:
        return issue
    singular = next((line for line in text if "singular matrix" in line.lower()), None)
    if singular:
        node = singular.split("check node", 1)[-1].strip() if "check node" in singular else "?"
        return f"singular matrix at node {node} (a floating node or a loop of voltage sources?)"
    undefined = [i for i, line in enumerate(text) if "undefined parameter" in line.lower()]
    if undefined:
        i = undefined[0]
        where = text[i - 1] if i > 0 and "line" in text[i - 1].lower() else ""
        return f"{text[i]} {('(' + where.rstrip(':') + ' of the deck)') if where else ''}".strip()
    if "operating point failed" in joined or "dc solution failed" in joined or (
        "timestep too small" in joined and "transient op" in joined
    ):
        return "no DC operating point: gmin stepping, source stepping and transient op all failed"
    for i, line in enumerate(text):
        if any(p.search(line) for p in _FATAL) and "cannot recover" not in line.lower() \
                and "please check your input" not in line.lower():
            if line.endswith(":"):  # "Error on line:" followed by the line and the reason
                return " ".join([line, *map(_echo, text[i + 1 : i + 2]), *text[i + 2 : i + 3]])
            if line.lower().endswith("from line") and i + 1 < len(text):
                # "can't find model 'x' from line" followed by the element's line
                return f"{line[: -len('from line')].rstrip()} (element line: {_echo(text[i + 1])})"
            return line
    for line in text:
        if "please check your input" in line.lower():
            return "ngspice could not parse the deck"
    return text[-1] if text else "no message"


class NgspiceSession:
    """ngspice's shared library in this process (one per process; not thread-safe).

    Create it in the worker process that will use it. ``broken`` turns True when ngspice
    can no longer be used and the process should be replaced.
    """

    _FREE_EVERY = 2000  # commands between releases of ngspice's command history

    def __init__(self) -> None:
        logging.getLogger("PySpice").setLevel(logging.CRITICAL)
        from PySpice.Spice.NgSpice.Shared import NgSpiceShared, ffi

        self._ffi = ffi
        self._shared = NgSpiceShared.new_instance()
        self._lib = self._shared._ngspice_shared
        self._commands = 0
        self.broken = False
        self._command("set num_threads=1")

    # -- low level ------------------------------------------------------------------------

    def _drain(self) -> tuple[list[str], list[str]]:
        out, err = list(self._shared._stdout), list(self._shared._stderr)
        self._shared._stdout.clear()
        self._shared._stderr.clear()
        return out, err

    def _command(self, command: str) -> tuple[int, list[str], list[str]]:
        self._commands += 1
        if self._commands % self._FREE_EVERY == 0:
            self._lib.ngSpice_Command(self._ffi.NULL)
        self._drain()
        rc = self._lib.ngSpice_Command(command.encode("ascii", "replace"))
        out, err = self._drain()
        return rc, out, err

    def _load(self, deck: str) -> tuple[int, list[str], list[str]]:
        lines = deck.splitlines() + [""]
        keep = [self._ffi.new("char[]", line.encode("utf-8", "replace")) for line in lines]
        array = self._ffi.new("char *[]", keep + [self._ffi.NULL])
        self._drain()
        rc = self._lib.ngSpice_Circ(array)
        out, err = self._drain()
        return rc, out, err

    def _current_plot(self) -> str:
        return self._ffi.string(self._lib.ngSpice_CurPlot()).decode("utf-8", "replace")

    def _vector(self, plot: str, name: str) -> np.ndarray | None:
        info = self._lib.ngGet_Vec_Info(f"{plot}.{name}".encode("ascii", "replace"))
        if info == self._ffi.NULL or info.v_length <= 0:
            return None
        n = info.v_length
        if info.v_compdata != self._ffi.NULL:
            raw = np.frombuffer(self._ffi.buffer(info.v_compdata, n * 16), dtype=np.float64)
            return (raw[0::2] + 1j * raw[1::2]).astype(np.complex128)
        raw = np.frombuffer(self._ffi.buffer(info.v_realdata, n * 8), dtype=np.float64)
        return raw.copy()

    def _free(self) -> None:
        self._command("destroy all")
        self._command("remcirc")

    # -- one analysis ---------------------------------------------------------------------

    def run(self, request: AnalysisRequest) -> AnalysisOutput:
        """Load the deck, run its steps, read the vectors, free everything.

        Parameters
        ----------
        request
            The deck, its steps and the vectors each step reads; its label names the
            analysis in errors.

        Returns
        -------
        AnalysisOutput
            The vectors read, one dict per step, with the warnings worth showing.

        Raises
        ------
        SimulatorError
            On a parse error, a failed analysis (no DC solution, singular matrix), a
            rejected command, or a vector that is not there. Its ``kind`` tells a bad
            netlist (``"parse"``) from a circuit without a solution (``"convergence"``).
        """
        import time

        if self.broken:
            raise SimulatorError("ngspice session is no longer usable", place=request.label,
                                 kind="crash")
        started, cpu_started = time.perf_counter(), time.process_time()
        messages = self._load_checked(request)
        reads: list[dict[str, np.ndarray]] = []
        warnings: list[str] = []
        try:
            for step in request.steps:
                reads.append(self._step(step, request.label, messages, warnings))
        finally:
            if not self.broken:
                self._free()
        return AnalysisOutput(
            reads=tuple(reads),
            warnings=tuple(dict.fromkeys(warnings)),
            transient_op=_TRANSIENT_OP_WARNING in warnings,
            seconds=time.perf_counter() - started,
            cpu_seconds=time.process_time() - cpu_started,
            messages=tuple(messages),
        )

    def _load_checked(self, request: AnalysisRequest) -> list[str]:
        """Load ``request``'s deck; its messages, or SimulatorError (kind ``parse``) when
        ngspice refused it (the session then broken where the library cannot recover)."""
        rc, out, err = self._load(request.deck)
        if rc != 0 or _fatal(err):
            if rc != 0 or any("cannot recover" in line.lower() for line in err):
                self.broken = True
            else:
                self._free()
            raise SimulatorError(f"parse error: {summarise_failure(err or out)}",
                                 place=request.label, kind="parse")
        return out + err

    def _step(self, step: Step, label: str, messages: list[str],
              warnings: list[str]) -> dict[str, np.ndarray]:
        """Send one step of an analysis and read its vectors (none where an optional
        command was rejected); ngspice's messages are added to ``messages``, what is worth
        showing to ``warnings``."""
        before = self._current_plot()
        rc, out, err = self._command(step.command)
        lines = out + err
        messages += lines
        if step.is_analysis:
            warnings += self._analysis_warnings(step, rc, lines, before, label)
        elif rc != 0 or _fatal(err):
            if step.optional:
                return {}
            raise SimulatorError(f"command {step.command!r} rejected: "
                                 f"{summarise_failure(err)}", place=label)
        return self._read(step, label)

    def _analysis_warnings(self, step: Step, rc: int, lines: list[str], before: str,
                           label: str) -> list[str]:
        """What an analysis step's messages ``lines`` warn of; SimulatorError when it failed
        (an error message, a nonzero ``rc``, or no new plot after ``before``)."""
        found = [_TRANSIENT_OP_WARNING] if any(_TRANSIENT_OP.search(x) for x in lines) else []
        plot = self._current_plot()
        if rc != 0 or plot == before or plot == "const" or _fatal(lines):
            raise SimulatorError(f"{step.command.split()[0]} failed: "
                                 f"{summarise_failure(lines)}", place=label,
                                 kind=failure_kind(lines))
        if any("gmin stepping" in line.lower() for line in lines):
            found.append("operating point needed gmin stepping")
        return found

    def _read(self, step: Step, label: str) -> dict[str, np.ndarray]:
        """The vectors ``step`` reads from the current plot (an optional one may be
        missing)."""
        values: dict[str, np.ndarray] = {}
        if step.read:
            plot = self._current_plot()
            for name in step.read:
                vector = self._vector(plot, name)
                if vector is None and step.optional:
                    continue
                if vector is None:
                    raise SimulatorError(f"vector {name} not found in plot {plot}",
                                         place=label)
                values[name] = vector
        return values
