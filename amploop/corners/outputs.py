"""Files in the out folder: results.json, loop-gain CSVs, decks.

results.json is written to a temporary name in the same folder and then renamed over the
final name, so an interruption never leaves half of it behind. Per-corner files (CSVs,
decks), which a rerun writes again, are written in place, by the worker process that ran
the corner's analysis when it shares this file system (see :mod:`amploop.corners.measure`).
"""

from __future__ import annotations

import fcntl
import json
import math
import os
import stat
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from amploop.analysis.loopgain import FrequencyResponse
from amploop.errors import JournalError, OutputError

__all__ = [
    "PER_CORNER",
    "OutFolder",
    "clean_json",
    "is_folder",
    "loop_gain_csv",
    "remove_stale",
    "write_into",
]


def clean_json(value):
    """Make ``value`` JSON-safe, through dicts, lists and tuples: numpy scalars to numbers,
    NaN/inf to None (never a number), paths to text."""
    if isinstance(value, dict):
        return {str(k): clean_json(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [clean_json(v) for v in value]
    if isinstance(value, (np.floating, float)):
        number = float(value)
        return number if math.isfinite(number) else None
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, Path):
        return str(value)
    return value


def is_folder(path: Path) -> bool | None:
    """Whether ``path`` is a folder (True), something else (False) or absent (None).

    Parameters
    ----------
    path
        The path to look up (symbolic links followed).

    Raises
    ------
    OutputError
        When the name itself cannot be looked up (a part longer than the file system's
        limit of 255 bytes, a loop of symbolic links, no permission).
    """
    try:
        return stat.S_ISDIR(os.stat(path).st_mode)
    except (FileNotFoundError, NotADirectoryError):
        return None
    except OSError as exc:
        raise OutputError(f"unusable out folder name: {exc.strerror}", file=path) from None


#: Out folders whose lock this process holds -> how many times it was taken.
_HELD: dict[Path, int] = {}


class OutFolder:
    """The out folder of one run.

    Parameters
    ----------
    path
        Created if missing (with its parents).

    Raises
    ------
    OutputError
        If it cannot be created or written.
    """

    def __init__(self, path: str | Path) -> None:
        self.path = Path(path).resolve()
        if is_folder(self.path) is False:
            raise OutputError("the out folder is a file, not a folder", file=self.path,
                              hint="give --out a new or existing folder")
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create the out folder: {exc.strerror}", file=self.path) from None
        if not os.access(self.path, os.W_OK):
            raise OutputError("the out folder is not writable", file=self.path)

    @contextmanager
    def lock(self, *, join: bool = False):
        """Hold the folder for this run; a second run on the same folder is refused.

        Parameters
        ----------
        join
            Join a lock this process already holds instead (the report drawn at the end
            of a run, under its run's lock). A run never joins one, so two runs in one
            process are refused as two processes are.
        """
        if join and self.path in _HELD:
            _HELD[self.path] += 1
            try:
                yield
            finally:
                _HELD[self.path] -= 1
            return
        path = self.path / ".amploop.lock"
        try:
            handle = open(path, "a+")  # noqa: SIM115 - held open for the whole run
        except OSError as exc:
            raise OutputError(f"cannot create the lock file: {exc.strerror}", file=path) from None
        try:
            fcntl.flock(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            handle.seek(0)
            owner = handle.read().strip() or "another process"
            handle.close()
            raise JournalError(
                f"another amploop run ({owner}) is using this out folder", file=self.path,
                hint="wait for it to finish, or use another --out folder",
            ) from None
        try:
            handle.seek(0)
            handle.truncate()
            handle.write(f"pid {os.getpid()}")
            handle.flush()
            _HELD[self.path] = 1
            yield
        finally:
            _HELD.pop(self.path, None)
            fcntl.flock(handle, fcntl.LOCK_UN)
            handle.close()

    def write_text(self, relative: str, text: str, *, durable: bool = False,
                   atomic: bool = True) -> Path:
        """Write ``text`` to ``relative`` inside the folder, through a temporary file when
        ``atomic`` and forced to disk first when ``durable`` (see :func:`write_into`)."""
        return write_into(self.path, relative, text, durable=durable, atomic=atomic)

    def write_json(self, relative: str, data: dict) -> Path:
        """Write ``data`` as indented JSON (:func:`clean_json` first) to ``relative`` inside
        the folder, atomically."""
        text = json.dumps(clean_json(data), indent=2, allow_nan=False) + "\n"
        return self.write_text(relative, text)


def write_into(folder: Path, relative: str, text: str | bytes, *, durable: bool = False,
               atomic: bool = True) -> Path:
    """Write ``text`` to ``relative`` inside the absolute path ``folder``.

    ``atomic`` writes a temporary file and renames it over the target, so the file is
    whole or absent after a crash of the application; ``durable`` also forces it to disk
    first (for results.json), which survives power loss at the cost of a sync. Per-corner
    files that a rerun writes again (decks, CSVs) are written in place. Usable in worker
    processes: it needs nothing but the folder's path.

    Parameters
    ----------
    folder
        The out folder, absolute.
    relative
        The file's path inside it; missing folders on the way are created.
    text
        The content, written as UTF-8 with line endings as they are (bytes: as they are).
    durable
        Force the file to disk before it counts as written.
    atomic
        Write a temporary file next to the target and rename it over the target.

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    OutputError
        If the target lies outside ``folder`` or cannot be written.
    """
    target = folder / relative
    if target.name in ("", ".", "..") or "\0" in relative:
        raise OutputError(f"refusing to write outside the out folder: {relative!r}",
                          file=folder)
    temporary = target.with_name(f".{target.name}.tmp{os.getpid()}") if atomic else target
    data = text if isinstance(text, bytes) else text.encode("utf-8")
    try:
        _prepare_folder(folder, target.parent, relative)
        try:
            _write_bytes(temporary, data, durable=durable)
        except FileNotFoundError:  # its folder went away since it was prepared: again
            _PREPARED.discard(target.parent)
            _prepare_folder(folder, target.parent, relative)
            _write_bytes(temporary, data, durable=durable)
        if atomic:
            os.replace(temporary, target)
    except OSError as exc:
        try:
            if atomic:
                temporary.unlink(missing_ok=True)
        except OSError:
            pass
        raise OutputError(f"cannot write {relative}: {exc.strerror or exc}", file=folder) from None
    return target


#: Folders inside out folders that this process has checked and created.
_PREPARED: set[Path] = set()


def _prepare_folder(folder: Path, parent: Path, relative: str) -> None:
    """Check once per process that ``parent`` lies inside ``folder`` (symbolic links
    followed), and create it."""
    if parent in _PREPARED:
        return
    resolved = parent.resolve()
    if resolved != folder and folder not in resolved.parents:
        raise OutputError(f"refusing to write outside the out folder: {relative!r}",
                          file=folder)
    parent.mkdir(parents=True, exist_ok=True)
    _PREPARED.add(parent)


def _write_bytes(path: Path, data: bytes, *, durable: bool) -> None:
    """Create or truncate ``path`` and write ``data``; a symbolic link there is refused
    (O_NOFOLLOW), so a link cannot carry a write out of the out folder."""
    flags = os.O_WRONLY | os.O_CREAT | os.O_TRUNC | os.O_NOFOLLOW | os.O_CLOEXEC
    handle = os.open(path, flags, 0o666)
    try:
        view = memoryview(data)
        while view:
            view = view[os.write(handle, view):]
        if durable:
            os.fsync(handle)
    finally:
        os.close(handle)


#: The per-corner files of an out folder: folder -> the suffix of the files amploop writes
#: there (``loop_gain/<corner>.csv``, ``decks/<corner>.cir``).
PER_CORNER = {"loop_gain": ".csv", "decks": ".cir"}


def remove_stale(folder: Path, keep) -> list[str]:
    """Remove the per-corner files (:data:`PER_CORNER`) of ``folder`` that this run did not
    write, so that none from an earlier job (a corner renamed or gone, a corner that
    failed this time) looks current. Other files there (a deck's own output) stay.

    Parameters
    ----------
    folder
        The out folder, absolute.
    keep
        The files the run wrote, relative to ``folder`` (``"loop_gain/tt.csv"``).

    Returns
    -------
    list of str
        The files removed, relative to ``folder``, sorted.

    Raises
    ------
    OutputError
        When a stale file cannot be removed.
    """
    keep = set(keep)
    removed = []
    for sub, suffix in PER_CORNER.items():
        try:
            candidates = sorted((folder / sub).glob(f"*{suffix}"))
        except OSError:
            continue
        for path in candidates:
            relative = f"{sub}/{path.name}"
            if relative in keep or path.is_dir():
                continue
            try:
                path.unlink(missing_ok=True)
            except OSError as exc:
                raise OutputError(f"cannot remove the earlier run's {relative}: {exc.strerror}",
                                  file=folder) from None
            removed.append(relative)
    return removed


def loop_gain_csv(response: FrequencyResponse) -> str:
    """CSV text of the loop gain ``response``: frequency_hz, magnitude_db, phase_deg, real,
    imag; 12 significant digits (1e-12 relative, well below what the analysis resolves)."""
    columns = np.column_stack([response.frequency_hz, response.magnitude_db,
                               response.phase_deg, response.values.real,
                               response.values.imag])
    row = "%.12g,%.12g,%.12g,%.12g,%.12g\n"
    return ("frequency_hz,magnitude_db,phase_deg,real,imag\n"
            + (row * len(columns)) % tuple(columns.ravel().tolist()))


