"""The files an analysis reads, bundled for a Dask worker that does not share the
coordinator's file system, and unpacked there.

:class:`FileBundler` gathers the contents of every file a deck includes (recursively:
an included file may include others, relative to its own folder). On the worker, the
bundle is written into a folder named by the files' content, under the same absolute
paths (``<tmp>/work/x/models.lib`` for ``/work/x/models.lib``), so relative includes
inside them still resolve; the folder is kept for the next analysis that bundles the
same files, and :func:`reroot` points the deck's absolute paths at the copies.
"""

from __future__ import annotations

import atexit
import hashlib
import os
import posixpath
import re
import shutil
import tempfile
import threading
from collections import OrderedDict
from collections.abc import Callable, Iterator
from contextlib import contextmanager

from amploop.bench.requests import AnalysisRequest
from amploop.errors import SimulatorError

__all__ = ["BUNDLES", "BundleStore", "FileBundler", "include_targets", "move_include_paths", "reroot"]

# .include / .inc / .incl FILE, and .lib FILE SECTION (".lib NAME" alone opens a section
# of a library file and reads nothing). The path may be quoted with " or '.
_INCLUDE = re.compile(
    r"""^(?P<head>[ \t]*\.(?P<keyword>include|incl|inc|lib)[ \t]+)
        (?:"(?P<dq>[^"\n]*)"|'(?P<sq>[^'\n]*)'|(?P<bare>[^\s"']+))
        (?P<rest>[^\n]*)$""",
    re.IGNORECASE | re.MULTILINE | re.VERBOSE,
)


def _path_of(match: re.Match) -> tuple[str | None, str]:
    """The path a matched statement reads (None if it reads nothing) and its quote."""
    if match.group("keyword").lower() == "lib":
        section = match.group("rest").split()
        if not section or section[0][0] in ";$":
            return None, ""  # ".lib name": a section header, not a read
    for group, quote in (("dq", '"'), ("sq", "'"), ("bare", "")):
        path = match.group(group)
        if path is not None:
            return path or None, quote
    return None, ""


def include_targets(text: str) -> list[str]:
    """The paths, as written, of the files ``text`` includes (``.include``, ``.lib f s``),
    in every ``.lib`` section: ngspice 39 reads the includes of all sections of a library
    file, not only of the section asked for."""
    found = []
    for line in text.splitlines():
        if not line.lstrip().startswith("."):
            continue
        match = _INCLUDE.match(line)
        if match is not None:
            path, _ = _path_of(match)
            if path:
                found.append(path)
    return found


def _read_text(path: str) -> str:
    # surrogateescape: any byte sequence survives the round trip to the worker unchanged
    with open(path, "rb") as handle:
        return handle.read().decode("utf-8", "surrogateescape")


class FileBundler:
    """The contents of every file a deck includes, for workers that cannot see them.

    Deck paths are absolute (amploop writes them so). Inside an included file a relative
    path is taken relative to that file's folder, as ngspice does. Files are read once and
    read again only when their size or modification time changes; a file that cannot be
    read here is left out, so the worker's ngspice reports it missing as a local one
    would.
    """

    def __init__(self) -> None:
        # read path -> (stat signature, content or None, include targets as written)
        self._cache: dict[str, tuple[tuple, str | None, tuple[str, ...]]] = {}

    def _file(self, path: str) -> tuple[str | None, tuple[str, ...]]:
        try:
            stat = os.stat(path)
            signature = (stat.st_ino, stat.st_size, stat.st_mtime_ns)
        except OSError:
            return None, ()
        cached = self._cache.get(path)
        if cached is not None and cached[0] == signature:
            return cached[1], cached[2]
        try:
            content = _read_text(path)
        except OSError:
            content, targets = None, ()
        else:
            targets = tuple(include_targets(content))
        self._cache[path] = (signature, content, targets)
        return content, targets

    def bundle(self, deck: str) -> tuple[tuple[str, str], ...]:
        """``((path, content), ...)`` of the files ``deck`` reads, by the path the worker
        must find each at (absolute, normalised), in the order they are first read."""
        files: dict[str, str] = {}
        seen: set[str] = set()
        # (where the worker will look for it, where this machine's ngspice would read it)
        queue = [(posixpath.normpath(p), p) for p in include_targets(deck)
                 if posixpath.isabs(p)]
        while queue:
            bundle_path, read_path = queue.pop(0)
            if bundle_path in seen:
                continue
            seen.add(bundle_path)
            content, targets = self._file(read_path)
            if content is None:
                continue
            files[bundle_path] = content
            for target in targets:
                if posixpath.isabs(target):
                    queue.append((posixpath.normpath(target), target))
                else:  # relative to the including file's folder, as ngspice takes it
                    queue.append((posixpath.normpath(posixpath.join(
                        posixpath.dirname(bundle_path), target)),
                        posixpath.join(posixpath.dirname(read_path), target)))
        return tuple(files.items())


def _rooted(path: str, root: str) -> str:
    return root + posixpath.normpath(path)


def move_include_paths(text: str, move: Callable[[str], str | None]) -> str:
    """``text`` with every absolute include path ``p`` (``.include``, ``.lib f s``) written
    as ``move(p)`` instead, in the quote it had; relative paths, and absolute ones for which
    ``move`` returns None, stay as they are."""
    def replace_path(match: re.Match) -> str:
        path, quote = _path_of(match)
        if not path or not posixpath.isabs(path):
            return match.group(0)  # relative: resolves next to the copy of its file
        moved = move(path)
        if moved is None:
            return match.group(0)
        return f"{match.group('head')}{quote}{moved}{quote}{match.group('rest')}"

    return _INCLUDE.sub(replace_path, text)


def reroot(text: str, root: str) -> str:
    """``text`` with every absolute include path moved under ``root``."""
    return move_include_paths(text, lambda path: _rooted(path, root))


def _write_files(request: AnalysisRequest, folder: str, root: str) -> None:
    """Write the bundled files under ``folder``, to be read from under ``root``.

    Every bundled file lands at ``folder + its absolute path``. The absolute include paths
    in the files are moved under ``root`` (also those of files that were not bundled, so
    that a file missing on the coordinator is missing here too); relative ones are left as
    they are and resolve next to the copies.
    """
    for path, content in request.files:
        if not posixpath.isabs(path) or posixpath.normpath(path) != path:
            raise SimulatorError(f"bundled file with an unusable path: {path!r}",
                                 place=request.label)
        target = _rooted(path, folder)
        os.makedirs(posixpath.dirname(target), exist_ok=True)
        with open(target, "wb") as handle:
            handle.write(reroot(content, root).encode("utf-8", "surrogateescape"))


class BundleStore:
    """Bundles written out once per worker process, in a folder named by their content.

    The analyses of one job all bundle the same files, so the folder of one is the folder
    of the next: writing and removing them for every analysis cost more than a demo
    analysis. At most ``limit`` idle bundles are kept; they live in the Dask worker's own
    local directory (which Dask removes with the worker), else in a temporary folder
    removed at exit.

    Attributes
    ----------
    limit
        Most idle bundles kept.
    """

    def __init__(self, limit: int = 8) -> None:
        self.limit = limit
        self._lock = threading.Lock()
        self._roots: OrderedDict[str, str] = OrderedDict()  # digest -> folder, oldest first
        self._busy: dict[str, int] = {}
        self._base: str | None = None

    def _base_folder(self) -> str:
        if self._base is None or not os.path.isdir(self._base):
            parent = None
            try:
                from distributed import get_worker

                parent = get_worker().local_directory
            except (ImportError, ValueError):  # not inside a Dask worker
                pass
            self._base = tempfile.mkdtemp(prefix="amploop-bundles-", dir=parent)
            atexit.register(shutil.rmtree, self._base, True)
        return self._base

    @contextmanager
    def folder(self, request: AnalysisRequest) -> Iterator[str]:
        """The folder the files of ``request`` are written under, for the length of the
        block."""
        digest = hashlib.sha256()
        for path, content in request.files:
            digest.update(path.encode("utf-8", "surrogateescape") + b"\0")
            digest.update(content.encode("utf-8", "surrogateescape") + b"\0")
        key = digest.hexdigest()[:24]
        with self._lock:
            root = self._roots.get(key)
            if root is not None and os.path.isdir(root):
                self._roots.move_to_end(key)
                self._busy[key] = self._busy.get(key, 0) + 1
            else:
                root = None
        if root is None:
            base = self._base_folder()
            root = posixpath.join(base, key)
            writing = tempfile.mkdtemp(prefix="writing-", dir=base)
            try:
                _write_files(request, writing, root)
                os.rename(writing, root)
            except OSError:
                shutil.rmtree(writing, ignore_errors=True)
                if not os.path.isdir(root):  # else another thread wrote it first
                    raise
            except BaseException:
                shutil.rmtree(writing, ignore_errors=True)
                raise
            with self._lock:
                self._roots[key] = root
                self._roots.move_to_end(key)
                self._busy[key] = self._busy.get(key, 0) + 1
                idle = [k for k in self._roots if not self._busy.get(k)]
                for old in idle[: max(0, len(self._roots) - self.limit)]:
                    shutil.rmtree(self._roots.pop(old), ignore_errors=True)
        try:
            yield root
        finally:
            with self._lock:
                self._busy[key] -= 1


BUNDLES = BundleStore()
