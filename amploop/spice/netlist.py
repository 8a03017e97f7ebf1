"""Reading and rewriting the user's SPICE netlist: text in, text out.

The reader understands just enough of the ngspice dialect to find the amplifier's
``.subckt``, its ports and parameters, global ``.param`` lines, the element that holds
the compensation capacitor or resistor, and the files that are included. Everything
else is carried through unchanged.

Dialect handled: ``*`` comment lines, ``;``, ``$ `` and ``//`` end-of-line comments,
``+`` continuation lines, ``.subckt name ports [params:] k=v ...`` / ``.ends``,
``.param``, ``.include`` / ``.inc`` and ``.lib file section`` (paths relative to the
including file), ``.lib section`` / ``.endl`` in library files, ``.model`` and
case-insensitive names.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

from amploop.errors import NetlistError, did_you_mean, one_line
from amploop.spice.expressions import evaluate
from amploop.spice.ngread import command_line, deck_text, dot_command, not_a_file

__all__ = [
    "LogicalLine",
    "Netlist",
    "SourceFile",
    "Statement",
    "Subckt",
    "check_target",
    "include_target",
    "lib_sections",
    "read_netlist",
    "read_source",
    "render_file",
    "replace_element_value",
    "replace_instance_param",
    "replace_param",
    "split_logical_lines",
    "tokenize",
]

# Dot-commands that belong to a simulation run, not to a circuit library. At the top level
# of the user's netlist they are left out of the generated testbench (as comments).
ANALYSIS_COMMANDS = frozenset(
    {
        ".ac", ".dc", ".tran", ".op", ".noise", ".tf", ".pz", ".sens", ".disto", ".four",
        ".print", ".plot", ".probe", ".save", ".meas", ".measure", ".temp", ".width",
        ".ic", ".nodeset", ".end", ".title", ".sp", ".pss", ".wrdata",
    }
)

# Files a netlist reaches through this command (any word ngspice takes for it: .inc, .incl,
# .incfoo; see ngread.dot_command) are read by ngspice when it loads the deck.
_INCLUDE_COMMANDS = frozenset({".include"})


@dataclass(frozen=True)
class LogicalLine:
    """One statement of a file as written: its physical lines and their joined meaning.

    Attributes
    ----------
    number
        1-based number of the first physical line.
    raw
        The physical lines exactly as read (comment lines inside a continuation included).
    text
        The statement with comments removed and ``+`` continuations joined; empty for
        comment and blank lines.
    """

    number: int
    raw: tuple[str, ...]
    text: str


def _strip_inline_comment(line: str) -> str:
    """Drop an end-of-line comment as ngspice 39 does outside ``.control``.

    ``;`` and ``//`` start a comment anywhere, ``$`` when it starts the line or follows a
    blank or a comma (``1k$x`` is not a comment). Quoted text and ``{...}`` are skipped.
    """
    if _COMMENT_START.search(line) is None:  # most lines: nothing that could start one
        return line
    depth = 0
    quote = ""
    for i, ch in enumerate(line):
        if quote:
            if ch == quote:
                quote = ""
            continue
        if ch in "'\"":
            quote = ch
        elif ch == "{":
            depth += 1
        elif ch == "}":
            depth = max(0, depth - 1)
        elif depth == 0:
            if ch == ";":
                return line[:i]
            if ch == "$" and (i == 0 or line[i - 1] in " \t,"):
                return line[:i]
            if ch == "/" and line[i : i + 2] == "//":
                return line[:i]
    return line


_COMMENT_START = re.compile(r"[;$/]")


def split_logical_lines(text: str) -> list[LogicalLine]:
    """Split netlist text into logical lines (continuations joined, comments removed).

    Parameters
    ----------
    text
        The whole file. Every character that ends a line for ngspice or for
        :meth:`str.splitlines` ends one here (``\\n``, ``\\r\\n``, ``\\r``, form feed,
        U+2028, ...: :data:`amploop.spice.ngread.LINE_BREAKS`).

    Returns
    -------
    list of LogicalLine
        In file order; every physical line belongs to exactly one logical line, so
        joining all ``raw`` tuples gives the file back.
    """
    physical = text.splitlines()
    logical: list[LogicalLine] = []
    for number, line in enumerate(physical, start=1):
        stripped = line.strip()
        if stripped.startswith("+") and logical and logical[-1].text:
            previous = logical[-1]
            # the "+" counts as text before a "$": ngspice 39 reads "+$ x" on (not a comment)
            addition = _strip_inline_comment(stripped)[1:].strip()
            joined = f"{previous.text} {addition}".strip()
            logical[-1] = LogicalLine(previous.number, (*previous.raw, line), joined)
            continue
        if stripped.startswith("*") or not stripped:
            # A comment or blank line inside a continuation sequence belongs to the statement
            # when a "+" line follows; attach it provisionally only to keep raw text whole.
            logical.append(LogicalLine(number, (line,), ""))
            continue
        logical.append(LogicalLine(number, (line,), _strip_inline_comment(line).strip()))
    return _attach_interrupted_continuations(logical)


def _attach_interrupted_continuations(lines: list[LogicalLine]) -> list[LogicalLine]:
    """Handle ``+`` lines that follow comment lines: ngspice joins them across the comments."""
    # split_logical_lines only joins a "+" line to the line right before it when that one is a
    # statement. A "+" line after comment lines was turned into its own statement starting with
    # "+"; fold it (and the comments before it) into the last statement.
    result: list[LogicalLine] = []
    pending: list[LogicalLine] = []
    for line in lines:
        if not line.text:
            pending.append(line)
            continue
        if line.text.startswith("+") and result:
            previous = result[-1]
            raw = previous.raw + tuple(r for p in pending for r in p.raw) + line.raw
            addition = line.text[1:].strip()
            result[-1] = LogicalLine(previous.number, raw, f"{previous.text} {addition}".strip())
            pending = []
            continue
        result.extend(pending)
        pending = []
        result.append(line)
    result.extend(pending)
    return result


_TOKEN_OPEN = {"{": "}", "(": ")", "'": "'", '"': '"'}
_GROUP_OPEN = re.compile(r"""[{('"]""")
_SEPARATORS = re.compile(r"[ \t,]+")
_QUOTE_OR_BRACE = re.compile(r"""[{}'"]""")


def tokenize(text: str) -> list[str]:
    """Split a statement into tokens, keeping ``{...}``, ``(...)`` and quoted groups whole.

    ``name = value`` is normalised to ``name=value`` so parameters read the same however
    they were spaced. Parentheses around a ``.model`` parameter list become blank space.

    Parameters
    ----------
    text
        One logical line's statement, comments removed (:attr:`LogicalLine.text`).
    """
    if text.lstrip()[:6].lower() == ".model":
        text = _unwrap_model_parentheses(text)
    if _GROUP_OPEN.search(text) is None:  # no groups: blanks and commas separate tokens
        tokens = [token for token in _SEPARATORS.split(text) if token]
    else:
        tokens = _grouped_tokens(text)
    return _join_assignments(tokens)


def _grouped_tokens(text: str) -> list[str]:
    """Tokens separated by blanks and commas outside ``{...}``, ``(...)`` and quotes."""
    tokens: list[str] = []
    current = ""
    stack: list[str] = []
    for ch in text:
        if stack:
            current += ch
            if ch == stack[-1]:
                stack.pop()
            elif ch in "{(" and stack[-1] not in "'\"":
                stack.append(_TOKEN_OPEN[ch])
            continue
        if ch in " \t,":
            if current:
                tokens.append(current)
                current = ""
            continue
        if ch in _TOKEN_OPEN:
            stack.append(_TOKEN_OPEN[ch])
        current += ch
    if current:
        tokens.append(current)
    return tokens


def _join_assignments(tokens: list[str]) -> list[str]:
    """Join ``a = b``, ``a= b`` and ``a =b`` into ``a=b``."""
    joined: list[str] = []
    i = 0
    while i < len(tokens):
        token = tokens[i]
        if token == "=" and joined and i + 1 < len(tokens):
            joined[-1] = f"{joined[-1]}={tokens[i + 1]}"
            i += 2
            continue
        if token.endswith("=") and len(token) > 1 and i + 1 < len(tokens):
            joined.append(token + tokens[i + 1])
            i += 2
            continue
        if token.startswith("=") and len(token) > 1 and joined:
            joined[-1] = joined[-1] + token
            i += 1
            continue
        joined.append(token)
        i += 1
    return joined


def _unwrap_model_parentheses(text: str) -> str:
    """``.model n nmos (level=1 ...)`` -> ``.model n nmos  level=1 ... ``: the outer group only."""
    if "(" not in text:  # cards written without the optional parentheses
        return text
    if text.count("(") == 1 and text.count(")") == 1 and _QUOTE_OR_BRACE.search(text) is None:
        opened, closed = text.index("("), text.index(")")
        if opened < closed:  # the common card: one plain pair around the parameters
            return text[:opened] + " " + text[opened + 1 : closed] + " " + text[closed + 1 :]
    return _unwrap_outer_group(text)


def _unwrap_outer_group(text: str) -> str:
    """The general case of :func:`_unwrap_model_parentheses`: quotes, braces, nesting."""
    quote = ""
    braces = 0
    parens = 0
    opened = -1
    for i, ch in enumerate(text):
        if quote:
            if ch == quote:
                quote = ""
        elif ch in "'\"":
            quote = ch
        elif ch == "{":
            braces += 1
        elif ch == "}":
            braces = max(0, braces - 1)
        elif braces == 0 and ch == "(":
            if parens == 0:
                opened = i
            parens += 1
        elif braces == 0 and ch == ")" and parens > 0:
            parens -= 1
            if parens == 0:
                return text[:opened] + " " + text[opened + 1 : i] + " " + text[i + 1 :]
    return text


def _is_assignment(token: str) -> bool:
    """``name=value`` (not an expression such as ``{a>=b?1p:2p}`` that holds an ``=``)."""
    return _ASSIGNMENT.match(token) is not None


_ASSIGNMENT = re.compile(r"^[A-Za-z_][\w.]*=(?!=)")


def _split_params_prefix(token: str) -> tuple[str, str]:
    """``params:cc=1p`` -> (``params:``, ``cc=1p``); ngspice accepts the glued form."""
    if token.lower().startswith("params:"):
        return token[: len("params:")], token[len("params:") :]
    return "", token


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


@dataclass(frozen=True)
class Subckt:
    """A ``.subckt`` definition.

    Attributes
    ----------
    name
        As written in the file.
    ports
        Port names as written, in order.
    params
        Default parameter values from the header, lower-case name -> expression text.
    header
        The ``.subckt`` statement.
    body
        Statements directly inside (nested subckts' bodies included, marked by their
        own ``subckt`` attribute).
    """

    name: str
    ports: tuple[str, ...]
    params: dict[str, str]
    header: Statement
    body: tuple[Statement, ...]

    def port_index(self, port: str) -> int | None:
        """The position of ``port`` among the ports (case-insensitive), or None."""
        lowered = [p.lower() for p in self.ports]
        return lowered.index(port.lower()) if port.lower() in lowered else None

    def element(self, name: str) -> Statement | None:
        """The element named ``name`` directly in this subckt (case-insensitive)."""
        for statement in self.body:
            if statement.subckt == self.name.lower() and statement.keyword == name.lower():
                return statement
        return None

    def elements(self) -> list[Statement]:
        """The element lines directly in this subckt (not in nested ones)."""
        return [
            s for s in self.body if s.subckt == self.name.lower() and not s.keyword.startswith(".")
        ]

    def local_params(self) -> dict[str, tuple[Statement, str]]:
        """``.param`` lines directly inside: lower-case name -> (statement, expression)."""
        found: dict[str, tuple[Statement, str]] = {}
        for statement in self.body:
            if statement.subckt == self.name.lower() and statement.keyword == ".param":
                for name, expr in _assignments(statement.tokens[1:]):
                    found[name.lower()] = (statement, expr)
        return found


def _assignments(tokens: tuple[str, ...] | list[str]) -> list[tuple[str, str]]:
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


# Characters that end a line for str.splitlines (and so for a reader of the message).




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
    return _parse_source(path, text, stop_at_end=False)


def _parse_source(path: Path, text: str | None, *, stop_at_end: bool) -> SourceFile:
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
    return _sections(read_source(path))


def _sections(source: SourceFile) -> dict[str, Statement]:
    return {
        s.tokens[1].lower(): s
        for s in source.statements
        if _is_section_header(s)
    }


def _is_section_header(statement: Statement) -> bool:
    """``.lib name`` opening a library section (``.lib file name`` reads one instead)."""
    return (statement.keyword == ".lib" and len(statement.tokens) == 2
            and statement.subckt is None)


@dataclass
class Netlist:
    """The user's netlist file and every file it reaches, parsed.

    Attributes
    ----------
    root
        The netlist file named in the job.
    files
        Every parsed file by absolute path.
    subckts
        Every ``.subckt`` reached, lower-case name -> definition (first one wins, as in SPICE).
    global_params
        Top-level ``.param`` definitions reached: lower-case name -> (statement, expression);
        the last one wins, as in ngspice.
    """

    root: Path
    files: dict[Path, SourceFile] = field(default_factory=dict)
    subckts: dict[str, Subckt] = field(default_factory=dict)
    global_params: dict[str, tuple[Statement, str]] = field(default_factory=dict)

    def subckt(self, name: str) -> Subckt:
        """The subckt called ``name``, or a :class:`NetlistError` with a did-you-mean."""
        found = self.subckts.get(name.lower())
        if found is None:
            raise NetlistError(
                f"no .subckt named {name!r}" + did_you_mean(name, [s.name for s in self.subckts.values()]),
                file=self.root,
            )
        return found

    def dependencies(self) -> list[Path]:
        """Every file the netlist reads, the root first."""
        return list(self.files)


def read_netlist(path: str | Path) -> Netlist:
    """Read the netlist file and follow its ``.include`` and ``.lib file section`` lines.

    Parameters
    ----------
    path
        The file holding (or including) the amplifier's ``.subckt``.

    Returns
    -------
    Netlist

    Raises
    ------
    NetlistError
        Missing files (naming the including file and line), unclosed blocks.
    """
    root = Path(path).resolve()
    netlist = Netlist(root=root)
    netlist.files[root] = _parse_source(root, None, stop_at_end=True)
    _read_into(netlist, root, section=None, seen=set())
    return netlist


def _read_into(netlist: Netlist, path: Path, section: str | None, seen: set) -> None:
    key = (path, section)
    if key in seen:
        return
    seen.add(key)
    source = netlist.files.get(path) or read_source(path)
    netlist.files[path] = source
    for statement in _active_statements(source, section):
        if statement.subckt is None and statement.keyword == ".param":
            for name, expr in _assignments(statement.tokens[1:]):
                netlist.global_params[name.lower()] = (statement, expr)
        target = include_target(statement)
        if target is not None:
            target_path, target_section = target
            check_target(statement, target_path)
            _read_into(netlist, target_path, target_section, seen)
            sections = _sections(netlist.files[target_path])
            if target_section is not None and target_section not in sections:
                raise NetlistError(
                    f".lib section {target_section!r} not found in {one_line(str(target_path))}"
                    + did_you_mean(target_section, sections),
                    file=statement.file,
                    place=statement.line,
                )
    _collect_subckts(netlist, source, section)


def _active_statements(source: SourceFile, section: str | None) -> list[Statement]:
    """Statements that take effect when the file is read whole (None) or for one section."""
    return [s for s in source.statements if s.section == section]


def _collect_subckts(netlist: Netlist, source: SourceFile, section: str | None) -> None:
    statements = _active_statements(source, section)
    for i, statement in enumerate(statements):
        if statement.keyword != ".subckt":
            continue
        name = statement.tokens[1]
        if name.lower() in netlist.subckts:
            continue
        ports: list[str] = []
        params: dict[str, str] = {}
        for token in statement.tokens[2:]:
            if token.lower() == "params:":
                continue
            token = _split_params_prefix(token)[1]
            if "=" in token:
                key, _, expr = token.partition("=")
                params[key.lower()] = expr
            elif not params:
                ports.append(token)
        depth = 0
        body: list[Statement] = []
        for inner in statements[i + 1 :]:
            if inner.keyword == ".subckt":
                depth += 1
            elif inner.keyword == ".ends":
                if depth == 0:
                    break
                depth -= 1
            body.append(inner)
        netlist.subckts[name.lower()] = Subckt(
            name=name, ports=tuple(ports), params=params, header=statement, body=tuple(body)
        )


# --- rewriting -------------------------------------------------------------------------


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
        prefix, body = _split_params_prefix(token)
        key = body.partition("=")[0]
        if _is_assignment(body) and key.lower() == name.lower():
            tokens[i] = f"{prefix}{key}={value}"
            return " ".join(tokens)
    raise NetlistError(f"parameter {name!r} not set here", file=statement.file, place=statement.line)


_VALUE_KEYS = {"r": ("r", "resistance"), "c": ("c", "capacitance"), "l": ("l", "inductance")}


def element_value_index(statement: Statement) -> int:
    """Index of the token holding a two-terminal element's value (R, C or L)."""
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
        if _is_assignment(token) and token.partition("=")[0].lower() in keys:
            return i
    if len(tokens) >= 4 and not _is_assignment(tokens[3]):
        return 3
    raise NetlistError(
        f"element {one_line(tokens[0])} has no value to set", file=statement.file,
        place=statement.line,
    )


def element_value(statement: Statement) -> str:
    """The value expression of an R, C or L element, as written."""
    token = statement.tokens[element_value_index(statement)]
    return token.partition("=")[2] if _is_assignment(token) else token


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
    tokens[i] = f"{key}={value}" if _is_assignment(tokens[i]) else value
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
        if _is_assignment(token) and key.lower() == name.lower():
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
                   active=frozenset({(Path(path), None)}))


def _units_to_inline(netlist: Netlist, edits: dict[tuple[Path, int], str]) -> set:
    """``(file, section)`` units whose text changes: they hold an edit, begin with a byte-order
    mark (ngspice 39 cannot read one), or read such a unit."""
    needed: set[tuple[Path, str | None]] = {
        (path, section) for path, source in netlist.files.items() if source.bom
        for section in (None, *_sections(source))
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
        for section in (None, *_sections(source))
    ]
    changed = True
    while changed:
        changed = False
        for path, section in units:
            if (path, section) in needed:
                continue
            for statement in _active_statements(netlist.files[path], section):
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
) -> tuple[str, list[str]]:
    """:func:`render_file` of one file, or of one ``.lib`` section of it (``section``)."""
    source = netlist.files[path]
    by_index = {s.index: s for s in source.statements}
    indices = range(len(source.lines))
    if section is not None:
        header = _sections(source)[section]
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
                keyword in ANALYSIS_COMMANDS or not keyword.startswith(".")):
            out.extend(f"* amploop left out: {raw}" for raw in logical.raw)
            notes.append(
                f"{path}:{statement.line}: {statement.tokens[0]} is outside the subckt; "
                "left out of the testbench"
            )
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
    if tokenize(_strip_inline_comment(line).strip()) != parts:
        raise NetlistError(f"{statement.tokens[0]} {one_line(statement.tokens[1])}: cannot write "
                           f"an include line that reads back the same for {text!r}",
                           file=statement.file, place=statement.line)
    return line


def _deck_path(statement: Statement, path: Path) -> str:
    """``path`` (resolved: a symbolic link may point anywhere) as deck text, or a NetlistError
    naming ``statement`` when it holds a line break or control character."""
    return deck_text(str(path), what=f"the file {statement.tokens[1]!r} resolves to a path that",
                     file=statement.file, place=statement.line, error=NetlistError)


def value_of(expression: str, params: dict[str, str], *, where: str) -> float:
    """Evaluate a parameter or element value expression to a float (SI units).

    Raises
    ------
    NetlistError
        If the expression uses something the small evaluator does not know.
    """
    try:
        return evaluate(expression, params)
    except ValueError as exc:
        file, _, place = where.rpartition(":")
        raise NetlistError(
            f"cannot evaluate {expression!r}: {exc}", file=file or None, place=place or None,
            hint="give the value with --set",
        ) from None


_NAME = re.compile(r"^[A-Za-z_][\w.]*$")


def is_name(text: str) -> bool:
    """True for a plausible SPICE parameter or node name."""
    return bool(_NAME.match(text))
