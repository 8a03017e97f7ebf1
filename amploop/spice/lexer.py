"""SPICE text to logical lines and tokens: comments, ``+`` continuations, braces, quotes
and ``params:`` handled as ngspice handles them. Text in, text out."""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = [
    "SEPARATORS",
    "LogicalLine",
    "grouped_tokens",
    "is_assignment",
    "split_logical_lines",
    "split_params_prefix",
    "strip_inline_comment",
    "tokenize",
    "unwrap_model_parentheses",
    "unwrap_outer_group",
]


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


def strip_inline_comment(line: str) -> str:
    """``line`` without its end-of-line comment, dropped as ngspice 39 does outside ``.control``.

    ``;`` and ``//`` start a comment anywhere, ``$`` when it starts the line or follows a
    blank or a comma (``1k$x`` is not a comment). Quoted text and ``{...}`` are skipped.

    Parameters
    ----------
    line
        One physical line of netlist text.
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
            addition = strip_inline_comment(stripped)[1:].strip()
            joined = f"{previous.text} {addition}".strip()
            logical[-1] = LogicalLine(previous.number, (*previous.raw, line), joined)
            continue
        if stripped.startswith("*") or not stripped:
            # A comment or blank line inside a continuation sequence belongs to the statement
            # when a "+" line follows; attach it provisionally only to keep raw text whole.
            logical.append(LogicalLine(number, (line,), ""))
            continue
        logical.append(LogicalLine(number, (line,), strip_inline_comment(line).strip()))
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


SEPARATORS = re.compile(r"[ \t,]+")


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
        text = unwrap_model_parentheses(text)
    if _GROUP_OPEN.search(text) is None:  # no groups: blanks and commas separate tokens
        tokens = [token for token in SEPARATORS.split(text) if token]
    else:
        tokens = grouped_tokens(text)
    return _join_assignments(tokens)


def grouped_tokens(text: str) -> list[str]:
    """Tokens of ``text`` separated by blanks and commas outside ``{...}``, ``(...)`` and quotes."""
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


def unwrap_model_parentheses(text: str) -> str:
    """``text`` with its model parentheses opened: ``.model n nmos (level=1 ...)`` ->
    ``.model n nmos  level=1 ... ``, the outer group only."""
    if "(" not in text:  # cards written without the optional parentheses
        return text
    if text.count("(") == 1 and text.count(")") == 1 and _QUOTE_OR_BRACE.search(text) is None:
        opened, closed = text.index("("), text.index(")")
        if opened < closed:  # the common card: one plain pair around the parameters
            return text[:opened] + " " + text[opened + 1 : closed] + " " + text[closed + 1 :]
    return unwrap_outer_group(text)


def unwrap_outer_group(text: str) -> str:
    """The general case of :func:`unwrap_model_parentheses` on ``text``: quotes, braces,
    nesting."""
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


def is_assignment(token: str) -> bool:
    """Whether ``token`` is ``name=value`` (not an expression such as ``{a>=b?1p:2p}`` that
    holds an ``=``)."""
    return _ASSIGNMENT.match(token) is not None


_ASSIGNMENT = re.compile(r"^[A-Za-z_][\w.]*=(?!=)")


def split_params_prefix(token: str) -> tuple[str, str]:
    """``token`` split at a glued ``params:``: ``params:cc=1p`` -> (``params:``, ``cc=1p``);
    ngspice accepts the glued form."""
    if token.lower().startswith("params:"):
        return token[: len("params:")], token[len("params:") :]
    return "", token
