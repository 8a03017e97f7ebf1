"""Rewriting the user's netlist: a parameter, an element's value or an instance
parameter set, and the files rendered back with every other byte as it was. Text in,
text out."""

from __future__ import annotations

from pathlib import Path

from amploop.errors import NetlistError, one_line
from amploop.spice.lexer import (
    is_assignment,
    split_params_prefix,
    strip_inline_comment,
    tokenize,
)
from amploop.spice.netlist import Netlist
from amploop.spice.ngread import deck_text
from amploop.spice.source import Statement, active_statements, include_target, source_sections

__all__ = [
    "ANALYSIS_COMMANDS",
    "add_subckt_ports",
    "element_value",
    "element_value_index",
    "render_file",
    "replace_element_value",
    "replace_instance_param",
    "replace_param",
]


def replace_param(statement: Statement, name: str, value: str) -> str:
    """The text of a ``.param`` (or ``.subckt``) statement with one parameter set.

    Parameters
    ----------
    statement
        The ``.param`` or ``.subckt`` statement.
    name
        The parameter (case-insensitive); it must be set in the statement already.
    value
        The new value text, e.g. ``"1.5p"``.

    Raises
    ------
    NetlistError
        If the statement does not set ``name``.
    """
    tokens = list(statement.tokens)
    for i, token in enumerate(tokens[1:], start=1):
        prefix, body = split_params_prefix(token)
        key = body.partition("=")[0]
        if is_assignment(body) and key.lower() == name.lower():
            tokens[i] = f"{prefix}{key}={value}"
            return " ".join(tokens)
    raise NetlistError(f"parameter {name!r} not set here", file=statement.file, place=statement.line)


def add_subckt_ports(statement: Statement, nodes: tuple[str, ...]) -> str:
    """The text of the ``.subckt`` ``statement`` with ``nodes`` appended to its ports
    (before ``params:`` and the parameter defaults): inner nodes brought out to the
    instance."""
    tokens = list(statement.tokens)
    end = 2
    while end < len(tokens) and tokens[end].lower() != "params:" \
            and not is_assignment(split_params_prefix(tokens[end])[1]):
        end += 1
    return " ".join(tokens[:end] + list(nodes) + tokens[end:])


_VALUE_KEYS = {"r": ("r", "resistance"), "c": ("c", "capacitance"), "l": ("l", "inductance")}


def element_value_index(statement: Statement) -> int:
    """Index of the token of ``statement`` (an R, C or L element) that holds its value."""
    kind = statement.keyword[0]
    tokens = statement.tokens
    keys = _VALUE_KEYS.get(kind)
    if keys is None:
        raise NetlistError(
            f"element {one_line(tokens[0])} is not a resistor or capacitor: its value cannot be set",
            file=statement.file,
            place=statement.line,
        )
    for i, token in enumerate(tokens[3:], start=3):
        if is_assignment(token) and token.partition("=")[0].lower() in keys:
            return i
    if len(tokens) >= 4 and not is_assignment(tokens[3]):
        return 3
    raise NetlistError(
        f"element {one_line(tokens[0])} has no value to set", file=statement.file,
        place=statement.line,
    )


def element_value(statement: Statement) -> str:
    """The value expression of the R, C or L element ``statement``, as written."""
    token = statement.tokens[element_value_index(statement)]
    return token.partition("=")[2] if is_assignment(token) else token


def replace_element_value(statement: Statement, value: str) -> str:
    """The text of an R, C or L element line with its value replaced.

    Parameters
    ----------
    statement
        The element line.
    value
        The new value text, e.g. ``"2k"``; it replaces the positional value, or the
        value of ``r=``, ``c=`` or ``l=`` (``resistance=`` ...) where that holds it.

    Raises
    ------
    NetlistError
        If the element is not an R, C or L, or has no value to set.
    """
    tokens = list(statement.tokens)
    i = element_value_index(statement)
    key = tokens[i].partition("=")[0]
    tokens[i] = f"{key}={value}" if is_assignment(tokens[i]) else value
    return " ".join(tokens)


def replace_instance_param(statement: Statement, name: str, value: str) -> str:
    """The text of a device line with ``name=value`` set (added when absent), e.g. ``w=2u``.

    Parameters
    ----------
    statement
        The device line (a MOSFET's).
    name
        The instance parameter (case-insensitive), e.g. ``"w"``.
    value
        The new value text, e.g. ``"2u"``.
    """
    tokens = list(statement.tokens)
    for i, token in enumerate(tokens[1:], start=1):
        key = token.partition("=")[0]
        if is_assignment(token) and key.lower() == name.lower():
            tokens[i] = f"{key}={value}"
            return " ".join(tokens)
    tokens.append(f"{name}={value}")
    return " ".join(tokens)


def render_file(
    netlist: Netlist,
    path: Path,
    edits: dict[tuple[Path, int], str],
    *,
    top_level: bool,
    keep_elements: bool = False,
) -> tuple[str, list[str]]:
    """Text of one netlist file for the testbench, with edits applied.

    Parameters
    ----------
    netlist
        The parsed netlist.
    path
        Which file to render.
    edits
        ``(file, logical-line index) -> new statement text``.
    top_level
        True for the user's netlist file itself: its top-level element lines and analysis
        commands are left out (as comments), since the testbench supplies its own, and
        the text stops at its ``.end``.
    keep_elements
        With ``top_level``: keep the top-level elements (and ``.ic``/``.nodeset``) and leave
        out only the run commands: the user's own testbench deck.

    Returns
    -------
    text, notes
        The rendered text and one note per line that was left out.

    Included files (and ``.lib file section`` sections) that hold an edit or begin with a
    byte-order mark, or read a file that does, are inlined (rendered recursively; a ``.end`` in them is commented out, as
    ngspice ignores it there); the others stay as ``.include`` / ``.lib`` lines with
    absolute paths.
    """
    inline = _units_to_inline(netlist, edits)
    return _render(netlist, Path(path), None, edits, top_level=top_level, inline=inline,
                   active=frozenset({(Path(path), None)}), keep_elements=keep_elements)


def _units_to_inline(netlist: Netlist, edits: dict[tuple[Path, int], str]) -> set:
    """``(file, section)`` units whose text changes: they hold an edit, begin with a byte-order
    mark (ngspice 39 cannot read one), or read such a unit."""
    needed: set[tuple[Path, str | None]] = {
        (path, section) for path, source in netlist.files.items() if source.bom
        for section in (None, *source_sections(source))
    }
    for file, index in edits:
        source = netlist.files.get(file)
        if source is None:
            continue
        section = next((s.section for s in source.statements if s.index == index), None)
        needed.add((file, section))
    units = [
        (path, section)
        for path, source in netlist.files.items()
        for section in (None, *source_sections(source))
    ]
    changed = True
    while changed:
        changed = False
        for path, section in units:
            if (path, section) in needed:
                continue
            for statement in active_statements(netlist.files[path], section):
                if include_target(statement) in needed:
                    needed.add((path, section))
                    changed = True
                    break
    return needed


def _render(
    netlist: Netlist,
    path: Path,
    section: str | None,
    edits: dict[tuple[Path, int], str],
    *,
    top_level: bool,
    inline: set,
    active: frozenset,
    keep_elements: bool = False,
) -> tuple[str, list[str]]:
    """:func:`render_file` of one file, or of one ``.lib`` section of it (``section``)."""
    source = netlist.files[path]
    by_index = {s.index: s for s in source.statements}
    indices = range(len(source.lines))
    if section is not None:
        header = source_sections(source)[section]
        end = next((s.index for s in source.statements
                    if s.keyword == ".endl" and s.section == section and s.index > header.index),
                   len(source.lines))
        indices = range(header.index + 1, end)
    out: list[str] = []
    notes: list[str] = []
    for index in indices:
        logical = source.lines[index]
        statement = by_index.get(index)
        if statement is None:
            out.extend(logical.raw)
            continue
        if (path, index) in edits:
            out.append(edits[(path, index)])
            continue
        keyword = statement.keyword
        target = include_target(statement)
        if target is not None:
            target_path, target_section = target
            if target in inline and target not in active:
                text, inner_notes = _render(netlist, target_path, target_section, edits,
                                            top_level=False, inline=inline,
                                            active=active | {target})
                what = _deck_path(statement, target_path) + (
                    f" section {target_section}" if target_section else "")
                out.append(f"* ---- begin {what} (inlined: amploop set values in it)")
                out.append(text)
                out.append(f"* ---- end {what}")
                notes.extend(inner_notes)
            else:
                out.append(_include_line(statement, target_path, target_section))
            continue
        if keyword == ".end" and statement.subckt is None:
            if top_level:
                out.append(f"* amploop: the rest of {path.name} follows .end and is left out")
                break
            out.extend(f"* amploop: ngspice ignores .end in an included file: {raw}"
                       for raw in logical.raw)
            continue
        if top_level and statement.subckt is None and statement.section is None and (
                (keyword in ANALYSIS_COMMANDS and not (keep_elements and keyword in _KEPT))
                or (not keyword.startswith(".") and not keep_elements)):
            out.extend(f"* amploop left out: {raw}" for raw in logical.raw)
            why = ("is a run command; amploop runs its own analyses" if keep_elements
                   else "is outside the subckt; left out of the testbench")
            notes.append(f"{path}:{statement.line}: {statement.tokens[0]} {why}")
            continue
        out.extend(logical.raw)
    return "\n".join(out), notes


def _include_line(statement: Statement, path: Path, section: str | None) -> str:
    """The include line of the deck: the keyword, the absolute path in double quotes (single
    ones when it holds a double quote; ngspice 39 and the reader take either) and the section
    as written. NetlistError if that line would not read back the same (a path holding both
    kinds of quote, a section token that reads as a comment)."""
    text = _deck_path(statement, path)
    parts = [statement.tokens[0], f"'{text}'" if '"' in text else f'"{text}"']
    if section is not None:
        parts.append(statement.tokens[2])
    line = " ".join(parts)
    if tokenize(strip_inline_comment(line).strip()) != parts:
        raise NetlistError(f"{statement.tokens[0]} {one_line(statement.tokens[1])}: cannot write "
                           f"an include line that reads back the same for {text!r}",
                           file=statement.file, place=statement.line)
    return line


def _deck_path(statement: Statement, path: Path) -> str:
    """``path`` (resolved: a symbolic link may point anywhere) as deck text, or a NetlistError
    naming ``statement`` when it holds a line break or control character."""
    return deck_text(str(path), what=f"the file {statement.tokens[1]!r} resolves to a path that",
                     file=statement.file, place=statement.line, error=NetlistError)


#: What a user's own testbench keeps of the run commands: its initial guesses.
_KEPT = frozenset({".ic", ".nodeset"})

# Dot-commands that belong to a simulation run, not to a circuit library. At the top level
# of the user's netlist they are left out of the generated testbench (as comments).
ANALYSIS_COMMANDS = frozenset(
    {
        ".ac", ".dc", ".tran", ".op", ".noise", ".tf", ".pz", ".sens", ".disto", ".four",
        ".print", ".plot", ".probe", ".save", ".meas", ".measure", ".temp", ".width",
        ".ic", ".nodeset", ".end", ".title", ".sp", ".pss", ".wrdata",
    }
)
