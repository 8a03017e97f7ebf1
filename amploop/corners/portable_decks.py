"""The files a hand-runnable deck includes, copied beside it so the out folder can move.

The decks amploop simulates name every file they read by its absolute path (the models,
included netlists). The copies in ``decks/`` of the out folder are for people: ``cd decks
&& ngspice -b corner.cir`` must still work after the out folder was copied to another
machine or the job's folder was moved. So the files those decks read (followed
recursively, as :class:`~amploop.sim.cluster.FileBundler` follows them for a cluster) are
copied into ``decks/include/``, keeping their folders relative to one another, and the
decks and the copies name them by paths relative to the file that includes them. ngspice
resolves a relative path in an included file against that file's own folder, so the
copies' own relative includes keep working unchanged.

The simulated decks, and so the journal keys, are not touched: only the text written to
``decks/`` is.
"""

from __future__ import annotations

import os
import posixpath
from dataclasses import dataclass
from pathlib import Path

from amploop.corners.outputs import write_into
from amploop.sim.bundles import FileBundler, move_include_paths

__all__ = ["DECKS", "INCLUDES", "INCLUDE_FOLDER", "NO_COPIES", "PortableIncludes", "copy_includes"]

#: The decks' folder in the out folder, and where the copies go inside it.
DECKS, INCLUDES = "decks", "include"
#: Where the copies go, relative to the out folder.
INCLUDE_FOLDER = f"{DECKS}/{INCLUDES}"


@dataclass(frozen=True)
class PortableIncludes:
    """Where each file the decks read was copied, for rewriting a deck's include lines.

    Attributes
    ----------
    copies
        ``(absolute path as the deck names it, path of the copy relative to decks/)``
        pairs; empty when the decks read no file.
    """

    copies: tuple[tuple[str, str], ...] = ()

    def rewrite(self, deck: str) -> str:
        """``deck`` (a deck that lies in ``decks/``) with the include paths of copied files
        made relative to ``decks/``; paths of files that were not copied stay absolute."""
        if not self.copies:
            return deck
        moved = dict(self.copies)
        return move_include_paths(deck, lambda path: moved.get(posixpath.normpath(path)))


#: Nothing copied: decks keep their absolute paths.
NO_COPIES = PortableIncludes()


def copy_includes(folder: Path, deck: str) -> PortableIncludes:
    """Copy every file ``deck`` reads into ``folder``/``decks/include/``.

    Files are placed by their path below the deepest folder that holds them all
    (``/work/job/models/x.lib`` and ``/work/job/ota.cir`` become ``include/models/x.lib``
    and ``include/ota.cir``), so relative includes between them still resolve; absolute
    include paths inside the copies are rewritten relative to the copy that holds them. A
    copy is written only when its content differs from what is there. Files the deck names
    that cannot be read are left out (the deck keeps their absolute path, and ngspice
    reports them missing as it would have).

    Parameters
    ----------
    folder
        The out folder, absolute.
    deck
        A generated deck (absolute include paths, as amploop writes them).

    Returns
    -------
    PortableIncludes
        What was copied where, for :meth:`PortableIncludes.rewrite`.

    Raises
    ------
    OutputError
        If a copy cannot be written.
    """
    files = FileBundler().bundle(deck)
    if not files:
        return NO_COPIES
    root = posixpath.commonpath([posixpath.dirname(path) for path, _ in files])
    copies = {path: posixpath.join(INCLUDES, posixpath.relpath(path, root))
              for path, _ in files}

    for path, content in files:
        here = posixpath.dirname(copies[path])

        def relative_to_copy(target: str, here: str = here) -> str | None:
            copy = copies.get(posixpath.normpath(target))
            return None if copy is None else posixpath.relpath(copy, here)

        data = move_include_paths(content, relative_to_copy).encode("utf-8", "surrogateescape")
        relative = posixpath.join(DECKS, copies[path])
        target = folder / relative
        if _same_bytes(target, data):
            continue
        write_into(folder, relative, data)
    return PortableIncludes(tuple(copies.items()))


def _same_bytes(path: Path, data: bytes) -> bool:
    """True when ``path`` is a regular file holding exactly ``data``."""
    try:
        if not path.is_file() or path.is_symlink() or os.path.getsize(path) != len(data):
            return False
        return path.read_bytes() == data
    except OSError:
        return False
