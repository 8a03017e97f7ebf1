"""One netlist file as statements: where each sits (file, line, subckt, ``.lib``
section), the files it includes, the sections it defines; ``.control`` blocks refused."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from amploop.errors import NetlistError, one_line
from amploop.spice.lexer import LogicalLine, split_logical_lines, tokenize
from amploop.spice.ngread import command_line, dot_command, not_a_file

__all__ = [
    "SourceFile",
    "Statement",
    "active_statements",
    "assignments",
    "check_target",
    "include_target",
    "lib_sections",
    "parse_source",
    "read_source",
    "source_sections",
]


@dataclass(frozen=True)
class Statement:
    """A statement of a netlist file together with where it sits.

    Attributes
    ----------
    file
        The file it is in (absolute).
    index
        Index of its logical line in that file (stable key for rewriting).
    line
        1-based physical line number, for messages.
    tokens
        :func:`tokenize` of the statement.
    subckt
        Name (lower case) of the innermost enclosing ``.subckt``; None at top level.
    section
        Name (lower case) of the enclosing ``.lib`` section of a library file; None outside.
    """

    file: Path
    index: int
    line: int
    tokens: tuple[str, ...]
    subckt: str | None
    section: str | None

    @property
    def keyword(self) -> str:
        """The first token in lower case: an element name, or the dot-command ngspice takes
        it for (``.incfoo`` is ``.include``: :func:`amploop.spice.ngread.dot_command`)."""
        return dot_command(self.tokens[0])

    @property
    def where(self) -> str:
        return f"{self.file}:{self.line}"


@dataclass(frozen=True)
class SourceFile:
    """One file of the netlist: its logical lines and the statements parsed from them.

    Attributes
    ----------
    path
        The file (absolute).
    lines
        Its logical lines, in file order (:func:`split_logical_lines`).
    statements
        The statements of those lines, in file order, without comment and blank lines or
        the insides of ``.control`` blocks.
    commands
        ``(line, what)`` for each line that makes ngspice run commands: a ``.control``
        block, a ``*#`` comment line, a ``.title`` naming ``*ng_script``
        (:func:`amploop.spice.ngread.command_line`).
    bom
        The file began with a UTF-8 byte-order mark (left out of ``lines``); ngspice 39
        cannot read such a file itself, so the testbench inlines it.
    """

    path: Path
    lines: tuple[LogicalLine, ...]
    statements: tuple[Statement, ...]
    commands: tuple[tuple[int, str], ...] = ()
    bom: bool = False


def assignments(tokens: tuple[str, ...] | list[str]) -> list[tuple[str, str]]:
    """``name=value`` pairs among ``tokens`` (``params:`` glued or not), names
    lower-cased."""
    pairs = []
    for token in tokens:
        if "=" in token:
            name, _, expr = token.partition("=")
            pairs.append((name, expr))
    return pairs


def include_target(statement: Statement) -> tuple[Path, str | None] | None:
    """The file (and section) an ``.include`` / ``.lib file section`` statement reads.

    Parameters
    ----------
    statement
        Any statement; None is returned for one that reads no file.
    """
    keyword = statement.keyword
    tokens = statement.tokens
    if keyword in _INCLUDE_COMMANDS and len(tokens) >= 2:
        return _resolve(statement, tokens[1]), None
    if keyword == ".lib" and len(tokens) >= 3:
        return _resolve(statement, tokens[1]), tokens[2].lower()
    return None


def _resolve(statement: Statement, name: str) -> Path:
    name = name.strip("'\"")
    try:
        path = Path(name).expanduser()
    except RuntimeError:  # "~user" of an unknown user (or no home): taken as written
        path = Path(name)
    if not path.is_absolute():
        path = statement.file.parent / path
    try:
        return path.resolve()
    except (OSError, ValueError, RuntimeError) as exc:  # a NUL byte, a symlink loop
        raise NetlistError(f"{statement.tokens[0]} {name!r}: not a usable file name ({exc})",
                           file=statement.file, place=statement.line) from None


def check_target(statement: Statement, path: Path) -> None:
    """A NetlistError naming ``statement`` unless ``path`` (the file it includes) is a regular
    file: missing, a directory, a device and a FIFO each get their own message."""
    problem = not_a_file(path)
    if problem is not None:
        raise NetlistError(f"{statement.tokens[0]} {one_line(statement.tokens[1])}: {problem} "
                           f"({one_line(str(path))})", file=statement.file, place=statement.line)


def read_source(path: Path, text: str | None = None) -> SourceFile:
    """Parse one file into logical lines and statements (no includes followed).

    The file is read as an included file: ngspice 39 ignores ``.end`` in included files
    and reads on, so statements after a ``.end`` are parsed too (the netlist file itself
    is read up to its ``.end`` by :func:`read_netlist`).

    Parameters
    ----------
    path
        The file; resolved to an absolute path.
    text
        Its content, when already at hand; None to read the file.

    Raises
    ------
    NetlistError
        If the file cannot be read or a ``.subckt`` / ``.lib`` block is not closed.
    """
    return parse_source(path, text, stop_at_end=False)


def parse_source(path: Path, text: str | None, *, stop_at_end: bool) -> SourceFile:
    """The file ``path`` (its ``text`` when given, else read) as statements; with
    ``stop_at_end``, nothing after a top-level ``.end`` counts (as ngspice reads the
    deck itself)."""
    path = Path(path).resolve()
    if text is None:
        try:
            text = path.read_text(encoding="utf-8", errors="replace")
        except FileNotFoundError:
            raise NetlistError("file not found", file=path) from None
        except OSError as exc:
            raise NetlistError(f"cannot read: {exc.strerror}", file=path) from None
    bom = text.startswith("\ufeff")
    text = text.removeprefix("\ufeff")
    if "\0" in text:  # ngspice's C strings end there: ".control\0x" opens a block
        raise NetlistError("holds a NUL byte, which ngspice reads as the end of the line",
                           file=path, place=len((text[: text.index("\0")] + "x").splitlines()),
                           hint="netlists are text files")
    lines = tuple(split_logical_lines(text))
    statements: list[Statement] = []
    commands: list[tuple[int, str]] = []
    subckt_stack: list[tuple[str, int]] = []
    section: tuple[str, int] | None = None
    in_control: int | None = None
    for index, logical in enumerate(lines):
        commands.extend(_command_lines(logical))
        if not logical.text:
            continue
        tokens = tuple(tokenize(logical.text))
        if not tokens:
            continue
        keyword = dot_command(tokens[0])
        if in_control is not None:
            if keyword == ".endc":
                in_control = None
            continue
        if keyword == ".control":
            in_control = logical.number
            commands.append((logical.number, _CONTROL_BLOCK))
        statement = Statement(
            file=path,
            index=index,
            line=logical.number,
            tokens=tokens,
            subckt=subckt_stack[-1][0] if subckt_stack else None,
            section=section[0] if section else None,
        )
        if keyword == ".subckt":
            if len(tokens) < 2:
                raise NetlistError(".subckt without a name", file=path, place=logical.number)
            subckt_stack.append((tokens[1].lower(), logical.number))
            statement = Statement(path, index, logical.number, tokens, tokens[1].lower(),
                                  statement.section)
        elif keyword == ".ends":
            if not subckt_stack:
                raise NetlistError(".ends without a .subckt", file=path, place=logical.number)
            subckt_stack.pop()
        elif keyword == ".lib" and len(tokens) == 2 and not subckt_stack:
            section = (tokens[1].lower(), logical.number)
        elif keyword == ".endl":
            section = None
        statements.append(statement)
        if keyword == ".end" and stop_at_end and not subckt_stack:
            break
    if subckt_stack:
        name, number = subckt_stack[-1]
        raise NetlistError(f".subckt {one_line(name)} is never closed by .ends", file=path,
                           place=number)
    if section is not None:
        raise NetlistError(
            f".lib section {one_line(section[0])} is never closed by .endl", file=path,
            place=section[1],
        )
    if in_control is not None:
        raise NetlistError(".control block is never closed by .endc", file=path, place=in_control)
    return SourceFile(path=path, lines=lines, statements=tuple(statements),
                      commands=tuple(commands), bom=bom)


_CONTROL_BLOCK = "a .control block, which can run shell commands and write files"


def _command_lines(logical: LogicalLine) -> list[tuple[int, str]]:
    """``(line, what)`` of the physical lines of ``logical`` that ngspice runs as commands."""
    found = []
    for offset, raw in enumerate(logical.raw):
        what = command_line(raw)
        if what is not None:
            found.append((logical.number + offset, what))
    return found


def lib_sections(path: Path) -> dict[str, Statement]:
    """The ``.lib name`` sections the library file ``path`` defines: lower-case name -> its
    statement."""
    return source_sections(read_source(path))


def source_sections(source: SourceFile) -> dict[str, Statement]:
    """The ``.lib name`` sections of ``source``: lower-case name -> its header
    statement."""
    return {
        s.tokens[1].lower(): s
        for s in source.statements
        if _is_section_header(s)
    }


def _is_section_header(statement: Statement) -> bool:
    """``.lib name`` opening a library section (``.lib file name`` reads one instead)."""
    return (statement.keyword == ".lib" and len(statement.tokens) == 2
            and statement.subckt is None)


# Files a netlist reaches through this command (any word ngspice takes for it: .inc, .incl,
# .incfoo; see ngread.dot_command) are read by ngspice when it loads the deck.
_INCLUDE_COMMANDS = frozenset({".include"})


def active_statements(source: SourceFile, section: str | None) -> list[Statement]:
    """Statements of ``source`` that take effect when the file is read whole
    (``section`` None) or for one section."""
    return [s for s in source.statements if s.section == section]
