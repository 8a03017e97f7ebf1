"""Reading values out of parsed TOML with messages that name the key path, and finding
where in the file a TOML syntax error is (the parser's own position is often a line off
or missing)."""

from __future__ import annotations

import re
from pathlib import Path
from typing import Any

from amploop.errors import JobError, did_you_mean
from amploop.spice.units import parse_value

__all__ = ["Reader", "deepest_nesting", "key_path", "place_of"]


class Reader:
    """Reads values out of the TOML tables with messages that name the key path.

    Each method takes the table it reads (``data``), the key and the key path of the
    table (``place``, such as ``"[analysis]"``) for the message; a value that is missing
    or wrong raises :class:`~amploop.errors.JobError` naming the job file and the place.

    Attributes
    ----------
    path
        The job file, for messages.
    """

    def __init__(self, path: Path) -> None:
        self.path = path

    def fail(self, place: str, problem: str, hint: str | None = None) -> JobError:
        """A JobError for ``problem`` at ``place`` of the job file, with an optional ``hint``."""
        return JobError(problem, file=self.path, place=place, hint=hint)

    def table(self, data: dict, key: str, place: str, *, required: bool = True) -> dict:
        """The table ``key`` of ``data`` at ``place``; ``{}`` when absent and not ``required``."""
        value = data.get(key)
        if value is None:
            if required:
                raise self.fail(place, f"missing table [{key}]")
            return {}
        if not isinstance(value, dict):
            raise self.fail(place, f"[{key}] must be a table, got {type(value).__name__}")
        return value

    def known(self, data: dict, allowed: set[str], place: str) -> None:
        """Refuse a key of ``data`` (at ``place``) not in ``allowed``, with a did-you-mean."""
        for key in data:
            if key not in allowed:
                raise self.fail(
                    f"{place}.{key_path(key)}" if place else key_path(key),
                    f"unknown key {key!r}" + did_you_mean(key, sorted(allowed)),
                )

    def string(self, data: dict, key: str, place: str, *, required: bool = True,
               default: str | None = None) -> str | None:
        """The non-empty string ``key`` of ``data`` at ``place``, stripped; ``default`` when absent,
        and None when that is None and the key is not ``required``."""
        value = data.get(key, default)
        if value is None:
            if required:
                raise self.fail(place, f"missing key {key!r}")
            return None
        if not isinstance(value, str) or not value.strip():
            raise self.fail(f"{place}.{key}", f"expected a non-empty string, got {value!r}")
        return value.strip()

    def expression(self, data: dict, key: str, place: str, *, default: str | None = None,
                   nonnegative: bool = False) -> str:
        """The value ``key`` of ``data`` at ``place`` (``default`` when absent): a SPICE value or
        ``{expression}``, as text; plain numbers are checked right away (and refused below
        zero when ``nonnegative``)."""
        value = data.get(key, default)
        if value is None:
            raise self.fail(place, f"missing key {key!r}")
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            raise self.fail(f"{place}.{key}", f"expected a value such as \"2p\", got {value!r}")
        text = str(value).strip()
        if "{" not in text and "'" not in text:
            number = self.number(value, f"{place}.{key}")
            if nonnegative and number < 0:
                raise self.fail(f"{place}.{key}", f"must not be negative, got {text}")
        elif not _balanced(text):
            raise self.fail(f"{place}.{key}", f"unbalanced braces or quotes in {text!r}")
        return text

    def number(self, value: Any, place: str, *, nonnegative: bool = False) -> float:
        """``value`` at ``place`` as a float (SPICE suffixes read; ``nonnegative`` refuses
        a negative one)."""
        try:
            number = parse_value(value)
        except ValueError as exc:
            raise self.fail(place, str(exc)) from None
        except OverflowError:  # a TOML integer beyond the float range
            raise self.fail(place, "number too large for a float") from None
        if nonnegative and number < 0:
            raise self.fail(place, f"must not be negative, got {value!r}")
        return number




_BARE_KEY = re.compile(r"[A-Za-z0-9_-]+")


def key_path(key: str) -> str:
    """``key`` as a TOML key path writes it: bare, or quoted with escapes, so that a
    place in a message is one line however odd the key (``""``, ``"a\\nb"``)."""
    if _BARE_KEY.fullmatch(key):
        return key
    escaped = []
    for ch in key:
        if ch in '"\\':
            escaped.append("\\" + ch)
        elif ord(ch) < 0x20 or ord(ch) == 0x7F or ch in "\x85\u2028\u2029":
            escaped.append(f"\\u{ord(ch):04x}")
        else:
            escaped.append(ch)
    return '"' + "".join(escaped) + '"'


def _balanced(text: str) -> bool:
    depth = 0
    for ch in text:
        depth += {"{": 1, "}": -1}.get(ch, 0)
        if depth < 0:
            return False
    return depth == 0 and text.count("'") % 2 == 0


def place_of(text: str, match: re.Match | None) -> str | None:
    """``line:column`` (1-based) where ``match`` starts in ``text``."""
    if match is None:
        return None
    before = text[: match.start()].replace("\r\n", "\n")
    return f"{before.count(chr(10)) + 1}:{len(before) - before.rfind(chr(10))}"


def deepest_nesting(text: str) -> str | None:
    """``line:column`` of the deepest ``[`` / ``{`` of the TOML ``text`` outside
    comments and one-line strings (only to point at the place after tomllib gave up on
    the nesting)."""
    depth = deepest = 0
    place = None
    quote = ""
    line, column = 1, 0
    escaped = comment = False
    for ch in text:
        column += 1
        if ch == "\n":
            line, column, quote, comment = line + 1, 0, "", False
        elif comment:
            continue
        elif quote:
            if escaped:
                escaped = False
            elif ch == "\\" and quote == '"':
                escaped = True
            elif ch == quote:
                quote = ""
        elif ch == "#":
            comment = True
        elif ch in "\"'":
            quote = ch
        elif ch in "[{":
            depth += 1
            if depth > deepest:
                deepest, place = depth, f"{line}:{column}"
        elif ch in "]}":
            depth = max(0, depth - 1)
    return place
