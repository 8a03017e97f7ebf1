"""How ngspice reads a deck: its line breaks, its dot-command prefixes, the lines it runs.

The netlist reader and the deck writer both follow these rules, so that amploop never
reads a file differently from ngspice in a way that lets a command through. Measured
with ngspice 39 (the shared library, as amploop loads decks, and ``ngspice -b``) on small
decks that ``touch`` a file when a command runs:

- **Line breaks.** ngspice splits a file on disk at ``\\n`` only; a deck loaded through
  the shared library is split by amploop with :meth:`str.splitlines`, which also breaks
  at ``\\r``, ``\\v``, ``\\f``, ``\\x1c``-``\\x1e``, U+0085, U+2028 and U+2029. A
  ``.control`` after a form feed in a comment line ran through the shared library. Every
  one of these is a line break here (:data:`LINE_BREAKS`).
- **Prefixes.** Dot-commands are matched by prefix, ignoring case: ``.controlx`` opens a
  ``.control`` block, ``.endcx`` closes it, ``.incfoo FILE`` and ``.incl FILE`` include a
  file, ``.library FILE SECTION`` reads a library section, ``.titlex`` sets the title
  (:func:`dot_command`).
- **Commands outside ``.control``.** A comment line beginning ``*#``, ``;#`` or ``$#``
  (after blanks) is run as a command (``*# shell ...`` ran); a ``.title`` line whose
  title begins ``*ng_script`` turns the whole deck into a command script
  (:func:`command_line`).
- **NUL.** ngspice's C strings end at a NUL byte: ``.control\\0junk`` opened a block.
"""

from __future__ import annotations

import os
import stat
import unicodedata
from pathlib import Path

from amploop.errors import AmploopError, JobError

__all__ = [
    "LINE_BREAKS",
    "command_line",
    "deck_text",
    "dot_command",
    "not_a_file",
]

#: Every character that ends a line for ngspice or for :meth:`str.splitlines`.
LINE_BREAKS = frozenset("\n\r\x0b\x0c\x1c\x1d\x1e\x85\u2028\u2029")

# (prefix, command): the first prefix a keyword starts with names the command. ".endc" and
# ".endl" come before anything shorter they could be mistaken for; ".end" and ".ends" are
# whole words in ngspice (".end" only when a blank or the line's end follows).
_PREFIXED = (
    (".control", ".control"),
    (".endc", ".endc"),
    (".endl", ".endl"),
    (".inc", ".include"),
    (".lib", ".lib"),
    (".title", ".title"),
)

# A comment line that ngspice runs as a command ("*#", and ";#" / "$#", which ngspice turns
# into "*#" when it strips end-of-line comments).
_COMMENT_COMMANDS = ("*#", ";#", "$#")


def dot_command(token: str) -> str:
    """The command ngspice takes ``token`` (a statement's first word) for, in lower case.

    Parameters
    ----------
    token
        The first word of a statement, as written.

    Returns
    -------
    str
        ``.controlx`` -> ``.control``, ``.incfoo`` -> ``.include``, ``.library`` ->
        ``.lib``; any other token in lower case.
    """
    lowered = token.lower()
    if lowered.startswith("."):
        for prefix, command in _PREFIXED:
            if lowered.startswith(prefix):
                return command
    return lowered


def command_line(line: str) -> str | None:
    """What makes the physical ``line`` run as a command outside ``.control``, or None.

    Parameters
    ----------
    line
        One physical line (no line break in it).
    """
    stripped = line.lstrip()
    if stripped[:2] in _COMMENT_COMMANDS:
        return f"a comment line beginning {stripped[:2]!r}, which ngspice runs as a command"
    if stripped[:6].lower() == ".title" and "ng_script" in stripped.lower():
        return "a .title naming *ng_script, which makes ngspice run the deck as commands"
    return None


def _unsafe(ch: str) -> bool:
    """A line break, a control character (tab included) or a lone surrogate."""
    return ch in LINE_BREAKS or unicodedata.category(ch) in ("Cc", "Zl", "Zp", "Cs")


def deck_text(value: str, *, what: str, file: str | Path | None = None,
              place: str | int | None = None, error: type[AmploopError] = JobError) -> str:
    """``value``, checked to be safe to write into one line of a deck.

    Every string from a job (or a path) that amploop writes into a deck passes here: a
    line break inside it would end the deck line, and what follows would be read by
    ngspice as a new line (``.control`` / ``shell ...``).

    Parameters
    ----------
    value
        The text to write.
    what
        What it is, for the message (``"[bias].common_mode"``).
    file, place
        Where it comes from, for the message.
    error
        The error class to raise (the stage the value belongs to).

    Raises
    ------
    AmploopError
        ``error`` when ``value`` holds a line break of any kind, a control character or
        text that is not valid Unicode.
    """
    bad = next((ch for ch in value if _unsafe(ch)), None)
    if bad is None:
        return value
    raise error(f"{what} holds {bad!r} (a line break or control character), "
                "which cannot be written into a deck line", file=file, place=place)


def not_a_file(path: Path) -> str | None:
    """Why ngspice cannot read ``path`` as a netlist file, or None for a regular file.

    A directory, a device, a FIFO or a socket each get their own reason: ngspice would
    crash or wait forever on some of them. The path is only looked at, never opened.

    Parameters
    ----------
    path
        The file an ``.include`` or ``.lib`` line names (absolute).
    """
    try:
        mode = os.stat(path).st_mode
    except FileNotFoundError:
        return "file not found"
    except (OSError, ValueError) as exc:
        return f"cannot use it ({getattr(exc, 'strerror', None) or exc})"
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "is a directory, not a file"
    if stat.S_ISFIFO(mode):
        return "is a named pipe (FIFO), not a file: reading it would wait for a writer"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "is a device, not a file"
    return "is not a regular file"
