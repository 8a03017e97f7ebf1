"""A small, safe evaluator for SPICE parameter expressions.

Used only to report the values in effect (``.param cc=1.5p``, ``{2*cbase}``); the
simulator evaluates the deck itself. Nothing here ever executes code.
"""

from __future__ import annotations

import math
import re

from amploop.spice.units import NUMBER_PATTERN, scale_of, split_number

__all__ = ["evaluate"]


def _pwr(base: float, exponent: float) -> float:
    """ngspice 39's ``pwr(x, y)`` and ``x^y`` / ``x**y`` in expressions: ``|x|**y``."""
    return math.pow(abs(base), exponent)


_FUNCTIONS = {
    "sqrt": math.sqrt, "exp": math.exp, "log": math.log, "ln": math.log, "log10": math.log10,
    "abs": abs, "min": min, "max": max, "pow": math.pow, "pwr": _pwr,
}
_CONSTANTS = {"pi": math.pi, "e": math.e}

_TOKEN = re.compile(
    rf"\s*(?:(?P<number>{NUMBER_PATTERN})"
    r"|(?P<name>[A-Za-z_][\w.]*)|(?P<op>\*\*|[-+*/^(),]))"
)


def _number(text: str) -> float:
    mantissa, letters = split_number(text)
    return float(mantissa) * scale_of(letters)[0]  # SPICE ignores other letters ("10V")


def evaluate(expression: str, params: dict[str, str] | None = None, _depth: int = 0) -> float:
    """Evaluate ``expression`` (optionally in ``{}`` or quotes) to a float.

    Parameters
    ----------
    expression
        A SPICE number or arithmetic expression: ``+ - * / ^ **``, parentheses, the
        functions sqrt exp log ln log10 abs min max pow pwr, and parameter names.
        Operators follow ngspice 39: ``^`` and ``**`` bind tighter than a sign
        (``-2^2 == -4``), group from the left (``2^3^2 == 64``) and take the magnitude of
        the base, like ``pwr`` (``(-2)^3 == 8``); ``pow`` is the plain power.
    params
        Parameter name (case-insensitive) -> expression text, looked up recursively.

    Raises
    ------
    ValueError
        On anything else (unknown name, syntax error, a loop in the definitions, a
        result out of range, parentheses nested more than 100 deep).
    """
    lowered = {k.lower(): v for k, v in (params or {}).items()}
    try:
        return _evaluate(expression, lowered, _depth, ())
    except RecursionError:  # parentheses within parameters within parameters ...
        raise ValueError("expression nested too deeply") from None


def _evaluate(expression: str, lowered: dict[str, str], depth: int,
              chain: tuple[str, ...]) -> float:
    """:func:`evaluate` with lower-case ``params`` and the names being evaluated (``chain``)."""
    if depth > 50:
        raise ValueError("parameters nested too deeply (more than 50 levels)")
    text = str(expression).strip()
    if len(text) >= 2 and (text[0], text[-1]) in {("{", "}"), ("'", "'"), ('"', '"')}:
        text = text[1:-1]
    tokens: list[tuple[str, str]] = []
    position = 0
    while position < len(text):
        if text[position:].strip() == "":
            break
        match = _TOKEN.match(text, position)
        if not match or match.end() == position:
            raise ValueError(f"cannot read {text[position:]!r}")
        kind = match.lastgroup
        tokens.append((kind, match.group(kind)))
        position = match.end()
    parser = _Parser(tokens, lowered, depth, chain)
    try:
        value = parser.expression()
    except OverflowError:
        raise ValueError(f"{text!r} is out of range") from None
    if parser.position != len(tokens):
        raise ValueError(f"unexpected {tokens[parser.position][1]!r}")
    if not math.isfinite(value):
        raise ValueError(f"{text!r} is not a finite number")
    return value


# Parentheses inside parentheses: keeps the recursive parser well off Python's stack limit.
_MAX_NESTING = 100


class _Parser:
    def __init__(self, tokens, params, depth, chain=()):
        self.tokens = tokens
        self.params = params
        self.depth = depth
        self.chain = chain
        self.position = 0
        self.nesting = 0

    def open_group(self) -> None:
        self.nesting += 1
        if self.nesting > _MAX_NESTING:
            raise ValueError(f"parentheses nested too deeply (more than {_MAX_NESTING} levels)")

    def signs(self) -> bool:
        """Read any run of ``+``/``-`` signs (a loop, not recursion); True when negative."""
        negative = False
        while self.peek() in ("+", "-"):
            negative ^= self.take()[1] == "-"
        return negative

    def peek(self) -> str | None:
        return self.tokens[self.position][1] if self.position < len(self.tokens) else None

    def take(self) -> tuple[str, str]:
        if self.position >= len(self.tokens):
            raise ValueError("expression ends too early")
        token = self.tokens[self.position]
        self.position += 1
        return token

    def expression(self) -> float:
        value = self.term()
        while self.peek() in ("+", "-"):
            op = self.take()[1]
            value = value + self.term() if op == "+" else value - self.term()
        return value

    def term(self) -> float:
        value = self.unary()
        while self.peek() in ("*", "/"):
            op = self.take()[1]
            right = self.unary()
            if op == "/" and right == 0:
                raise ValueError("division by zero")
            value = value * right if op == "*" else value / right
        return value

    def unary(self) -> float:
        negative = self.signs()
        value = self.power()
        return -value if negative else value

    def power(self) -> float:
        value = self.atom()
        while self.peek() in ("**", "^"):  # left to right, as ngspice 39 groups them
            self.take()
            value = _pwr(value, self.signed_atom())
        return value

    def signed_atom(self) -> float:
        """An exponent: ``2^-1`` is 0.5."""
        negative = self.signs()
        value = self.atom()
        return -value if negative else value

    def atom(self) -> float:
        kind, text = self.take()
        if kind == "number":
            return _number(text)
        if kind == "op" and text == "(":
            self.open_group()
            value = self.expression()
            if self.take()[1] != ")":
                raise ValueError("missing ')'")
            self.nesting -= 1
            return value
        if kind == "name":
            name = text.lower()
            if self.peek() == "(":
                if name not in _FUNCTIONS:
                    raise ValueError(f"unknown function {text!r}")
                self.take()
                self.open_group()
                args = [self.expression()]
                while self.peek() == ",":
                    self.take()
                    args.append(self.expression())
                if self.take()[1] != ")":
                    raise ValueError("missing ')'")
                self.nesting -= 1
                try:
                    return float(_FUNCTIONS[name](*args))
                except TypeError:
                    raise ValueError(f"{text}() does not take {len(args)} argument(s)") from None
                except ValueError:
                    raise ValueError(f"{text}({', '.join(map(repr, args))}) is undefined") from None
            if name in self.params:
                if name in self.chain:
                    loop = " -> ".join((*self.chain[self.chain.index(name):], name))
                    raise ValueError(f"parameters defined in terms of each other in a loop: {loop}")
                return _evaluate(self.params[name], self.params, self.depth + 1,
                                 (*self.chain, name))
            if name in _CONSTANTS:
                return _CONSTANTS[name]
            raise ValueError(f"unknown parameter {text!r}")
        raise ValueError(f"unexpected {text!r}")


_BRACED = re.compile(r"\{([^{}]*)\}|'([^']*)'")


PARAM_NAME = re.compile(r"[A-Za-z_][\w.]*")

# a number where the evaluator reads one: not the digits inside a name such as c2
_NUMBER_IN_TEXT = re.compile(rf"(?<![\w.]){NUMBER_PATTERN}")


_FUNCTION_NAMES = {"sqrt", "exp", "log", "ln", "log10", "abs", "min", "max", "pow", "pwr", "pi"}


def referenced_params(expression: str) -> set[str]:
    """Lower-case parameter names used inside ``{...}`` or quotes of the SPICE ``expression``."""
    names: set[str] = set()
    for match in _BRACED.finditer(expression):
        inner = match.group(1) if match.group(1) is not None else match.group(2)
        # drop numbers with suffixes such as 2p, 1e-12, 3meg before looking for names
        inner = _NUMBER_IN_TEXT.sub(" ", inner)
        names.update(n.lower() for n in PARAM_NAME.findall(inner))
    return names - _FUNCTION_NAMES
