"""Every file ngspice reads for a testbench deck, transitively, and the lines that run commands.

One walk serves two ends: the journal key hashes every file in it, so that an edit
anywhere a deck reads (a card in a file the models file includes) is never answered
from an old record; and the command check refuses every line in it that would make
ngspice run a command (:attr:`amploop.spice.netlist.SourceFile.commands`).

The walk reads as ngspice 39 reads (``src/frontend/inpcom.c``, checked on small decks):

- an ``.include`` (any word ngspice takes for it: ``.inc``, ``.incfoo``) is read while
  the including file is read, wherever it stands, in every ``.lib`` section alike; a file
  that includes itself, directly or through others, made ngspice crash (signal 11), so
  such a loop is an error naming the files;
- a library file named by ``.lib FILE SECTION`` is read whole once, and then only the
  named section is expanded; a section that reads itself again made ngspice loop forever,
  so that is an error too;
- a directory, a device or a FIFO named by either gets its own message.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from amploop.errors import NetlistError
from amploop.spice.netlist import Netlist
from amploop.spice.source import SourceFile, check_target, include_target, read_source

__all__ = ["FilesRead", "files_read"]


@dataclass(frozen=True)
class FilesRead:
    """What ngspice reads for a deck.

    Attributes
    ----------
    files
        Every file it reads (absolute), in the order the walk first reached them.
    commands
        ``(file, line, what)`` of each line in them that makes ngspice run commands.
    """

    files: tuple[Path, ...]
    commands: tuple[tuple[Path, int, str], ...]


def files_read(netlist: Netlist, *, includes: tuple[Path, ...] = (), models: Path | None = None,
               sections: tuple[str, ...] = (), inlined: frozenset[Path] | None = None) -> FilesRead:
    """Walk everything a testbench of ``netlist`` makes ngspice read.

    Parameters
    ----------
    netlist
        The user's netlist as read (its root is read up to its ``.end``, as the deck
        holds it).
    includes
        The job's ``[amplifier].includes`` files.
    models
        The job's models file, if any.
    sections
        The models file's sections the corners name; none: it is included whole.
    inlined
        Files the testbench writes into the deck as text (the netlist's own files): only
        they may begin with a byte-order mark, which ngspice cannot read in a file it
        opens itself. None: every file of ``netlist``.

    Raises
    ------
    NetlistError
        An include or library-section loop, an included path that is not a regular
        file, a file ngspice would open that begins with a byte-order mark.
    """
    walk = _Walk(dict(netlist.files), frozenset(netlist.files) if inlined is None else inlined)
    roots: list[tuple[Path, str | None]] = [(netlist.root, None)]
    roots += [(path, None) for path in includes]
    if models is not None:
        roots += [(models, section.lower()) for section in sections] or [(models, None)]
    for path, section in roots:
        walk.expand(path, section, chain=())
    return FilesRead(files=tuple(walk.order),
                     commands=tuple((path, line, what) for path in walk.order
                                    for line, what in walk.sources[path].commands))


class _Walk:
    """The state of one :func:`files_read`: files read so far and units expanded."""

    def __init__(self, sources: dict[Path, SourceFile], inlined: frozenset[Path]) -> None:
        self.sources = sources
        self.inlined = inlined
        self.order: list[Path] = []
        self.reading: list[Path] = []  # the include chain of the file being read
        self.expanding: list[tuple[Path, str | None]] = []
        self.expanded: set[tuple[Path, str | None]] = set()

    def read(self, path: Path) -> SourceFile:
        """Read ``path`` whole and, depth first, every file it includes."""
        if path in self.order:
            return self.sources[path]
        source = self.sources.get(path) or read_source(path)
        self.sources[path] = source
        if source.bom and path not in self.inlined:
            raise NetlistError("begins with a UTF-8 byte-order mark, which ngspice cannot read "
                               "in a file it opens itself", file=path, place=1,
                               hint="save the file without one")
        self.order.append(path)
        self.reading.append(path)
        for statement in source.statements:
            target = include_target(statement)
            if target is None or target[1] is not None:
                continue
            check_target(statement, target[0])
            if target[0] in self.reading:
                loop = self.reading[self.reading.index(target[0]):] + [target[0]]
                raise NetlistError("include loop: " + " includes ".join(map(str, loop))
                                   + " (ngspice would crash reading it)",
                                   file=statement.file, place=statement.line)
            self.read(target[0])
        self.reading.pop()
        return source

    def expand(self, path: Path, section: str | None, *, chain: tuple) -> None:
        """Expand one unit (a file's top level, or one ``.lib`` section of it) as ngspice
        puts it into the deck, and the library sections it names, depth first."""
        unit = (path, section)
        if unit in self.expanding:
            loop = self.expanding[self.expanding.index(unit):] + [unit]
            raise NetlistError("library section loop: " + " reads ".join(
                f"{p} section {s}" for p, s in loop) + " (ngspice would never finish reading it)",
                file=chain[0].file, place=chain[0].line)
        if unit in self.expanded:
            return
        self.expanding.append(unit)
        for statement in self.read(path).statements:
            if statement.section != section:
                continue
            target = include_target(statement)
            if target is None:
                continue
            check_target(statement, target[0])
            self.expand(target[0], target[1], chain=(statement,))
        self.expanding.pop()
        self.expanded.add(unit)
