"""Where in the user's files an ngspice parse error is: the file and line to fix.

ngspice numbers the lines of its expanded deck (inside a subckt often "line no. 0") and
names elements by their flattened names (``m.x1.m3``), so its line numbers mean little to
the user. The names in its message are looked up in the user's files instead, most
specific first:

1. a model card ngspice refused ("model nch (level=99) on line 30: Only MOS device levels
   … are supported", from :func:`amploop.sim.ngspice.summarise_failure`): the ``.model``
   statement of that name, the one on that line where several files or ``.lib`` sections
   define it, with the element that needed it;
2. the element ngspice rejected ("Error on line: m.x1.m3 …", "(element line: cc nz out
   cc)"): the element statement of that name, in the job's subckt first;
3. any other name the message quotes (``'x'``, ``[x]``): the first statement using it.

A ``.param cc=3p`` never takes the blame for an element ``Cc nz out cc`` that uses the
name as a model: the element is found first.
"""

from __future__ import annotations

import functools
import re
from pathlib import Path

from amploop.errors import AmploopError
from amploop.spice.source import Statement, read_source

__all__ = ["locate_parse_error"]

_DECK_LINE = re.compile(r"\s*\(Netlist line no\. \d+ of the deck\)")
_MODEL_ISSUE = re.compile(r"model (?P<name>\S+)(?: \([^)]*\))? on line (?P<line>\d+): ")
_REJECTED = re.compile(r"; rejected: (?P<name>\S+)$")
_ELEMENT = [re.compile(r"[Ee]rror on line:\s*(?P<name>[^\s:]+)"),
            re.compile(r"\(element line: (?P<name>[^\s)]+)")]
_QUOTED = [re.compile(r"\[([^\]]+)\]"), re.compile(r"'([\w.#$-]+\(?)'"),
           re.compile(r"unknown \w+:\s*(?:\S+\s+)*(\S+)$")]
# a flattened element name: its type letter and the instances it sits in, "m.x1.xa."
_FLATTENED = re.compile(r"^[a-z]\.(?:[^.\s]+\.)+", re.IGNORECASE)


def locate_parse_error(amplifier, problem: str) -> str:
    """Prefix an ngspice parse error with the user's file and line where it can be fixed.

    Parameters
    ----------
    amplifier
        The prepared :class:`~amploop.bench.amplifier.Amplifier` whose deck ngspice refused.
    problem
        The parse error, one line (``"parse error: …"``).

    Returns
    -------
    str
        ``file:line: problem`` without ngspice's deck line numbers; ``problem`` as it is
        when no name in it is found in the user's files.
    """
    sources = _sources(amplifier)
    cleaned = _DECK_LINE.sub("", problem)
    issue = _MODEL_ISSUE.search(cleaned)
    if issue is not None:
        card = _model_card(sources, issue.group("name"), int(issue.group("line")))
        if card is not None:
            text = cleaned[: issue.end("name")] + cleaned[issue.end("name"):].replace(
                f" on line {issue.group('line')}:", ":", 1)
            rejected = _REJECTED.search(text)
            element = rejected and _element(sources, amplifier, rejected.group("name"))
            if element is not None:
                text = (text[: rejected.start()]
                        + f"; it is the model of {element.tokens[0]} at {element.where}")
            return f"{card.where}: {text}"
    for pattern in _ELEMENT:
        for match in pattern.finditer(cleaned):
            element = _element(sources, amplifier, match.group("name"))
            if element is not None:
                return f"{element.where}: {cleaned}"
    for pattern in _QUOTED:
        for match in pattern.finditer(cleaned):
            statement = _first_use(sources, match.group(1).strip("("))
            if statement is not None:
                return f"{statement.where}: {cleaned}"
    return problem


def _sources(amplifier) -> list:
    """The user's netlist files as read, then every other file the decks read (the models
    file and what it includes), parsed once per file version."""
    sources = list(amplifier.netlist.files.values())
    known = set(amplifier.netlist.files)
    for path in amplifier.files:
        if path not in known:
            source = _read(Path(path))
            if source is not None:
                sources.append(source)
    return sources


def _read(path: Path):
    try:
        stamp = path.stat().st_mtime_ns
    except OSError:
        return None
    return _read_version(path, stamp)


@functools.lru_cache(maxsize=32)
def _read_version(path: Path, stamp: int):
    """:func:`~amploop.spice.netlist.read_source` of ``path`` as it was at ``stamp`` (its
    modification time, ns): a corner list of parse errors reads each file once."""
    try:
        return read_source(path)
    except (OSError, AmploopError):  # only read to point at a line: never an error itself
        return None


def _model_card(sources: list, name: str, line: int) -> Statement | None:
    """The ``.model`` statement named ``name``; the one on ``line`` when there are several."""
    cards = [s for source in sources for s in source.statements
             if s.keyword == ".model" and len(s.tokens) > 1 and s.tokens[1].lower() == name.lower()]
    return next((c for c in cards if c.line == line), cards[0] if cards else None)


def _element(sources: list, amplifier, flattened: str) -> Statement | None:
    """The element statement ngspice names ``flattened`` (``m.x1.m3`` or ``m3``), in the
    job's subckt first."""
    name = _FLATTENED.sub("", flattened).lower()
    if not name or name.startswith("."):
        return None
    found = [s for source in sources for s in source.statements
             if s.keyword == name and not s.keyword.startswith(".")]
    inside = [s for s in found if s.subckt == amplifier.subckt.name.lower()]
    return (inside or found or [None])[0]


def _first_use(sources: list, word: str) -> Statement | None:
    """The first statement of the user's files that uses ``word`` (case-insensitive)."""
    pattern = re.compile(rf"(?<![\w.]){re.escape(word)}(?![\w])", re.IGNORECASE)
    for source in sources:
        for statement in source.statements:
            if any(pattern.search(token) for token in statement.tokens):
                return statement
    return None
