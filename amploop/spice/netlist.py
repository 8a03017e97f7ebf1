"""Reading the user's SPICE netlist as a whole: the files it includes, its subckts and
parameters; the lexer (:mod:`.lexer`), the file model (:mod:`.source`) and the rewriter
(:mod:`.rewrite`) do the parts. Text in, text out.

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

from dataclasses import dataclass, field
from pathlib import Path

from amploop.errors import NetlistError, did_you_mean, one_line
from amploop.spice.expressions import evaluate
from amploop.spice.lexer import (
    split_params_prefix,
)
from amploop.spice.source import (
    SourceFile,
    Statement,
    active_statements,
    assignments,
    check_target,
    include_target,
    parse_source,
    read_source,
    source_sections,
)

__all__ = ["Netlist", "Subckt", "read_netlist"]


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
                for name, expr in assignments(statement.tokens[1:]):
                    found[name.lower()] = (statement, expr)
        return found


# Characters that end a line for str.splitlines (and so for a reader of the message).


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
    netlist.files[root] = parse_source(root, None, stop_at_end=True)
    _read_into(netlist, root, section=None, seen=set())
    return netlist


def _read_into(netlist: Netlist, path: Path, section: str | None, seen: set) -> None:
    key = (path, section)
    if key in seen:
        return
    seen.add(key)
    source = netlist.files.get(path) or read_source(path)
    netlist.files[path] = source
    for statement in active_statements(source, section):
        if statement.subckt is None and statement.keyword == ".param":
            for name, expr in assignments(statement.tokens[1:]):
                netlist.global_params[name.lower()] = (statement, expr)
        target = include_target(statement)
        if target is not None:
            target_path, target_section = target
            check_target(statement, target_path)
            _read_into(netlist, target_path, target_section, seen)
            sections = source_sections(netlist.files[target_path])
            if target_section is not None and target_section not in sections:
                raise NetlistError(
                    f".lib section {target_section!r} not found in {one_line(str(target_path))}"
                    + did_you_mean(target_section, sections),
                    file=statement.file,
                    place=statement.line,
                )
    _collect_subckts(netlist, source, section)


def _collect_subckts(netlist: Netlist, source: SourceFile, section: str | None) -> None:
    statements = active_statements(source, section)
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
            token = split_params_prefix(token)[1]
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

