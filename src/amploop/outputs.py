"""Files in the out folder: results.json, loop-gain CSVs, decks. Written atomically.

Every file is written to a temporary name in the same folder and then renamed over the
final name, so an interruption never leaves half a file behind.
"""

from __future__ import annotations

import fcntl
import io
import json
import math
import os
import queue
import threading
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from .errors import JournalError, OutputError
from .loopgain import FrequencyResponse

__all__ = ["OutFolder", "clean_json"]


def clean_json(value):
    """Make a value JSON-safe: numpy scalars to floats, NaN/inf to None (never a number)."""
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
        self._writes: queue.Queue | None = None
        self._writer: threading.Thread | None = None
        self._write_error: OutputError | None = None
        self.path = Path(path).resolve()
        try:
            self.path.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise OutputError(f"cannot create the out folder: {exc.strerror}", file=self.path) from None
        if not os.access(self.path, os.W_OK):
            raise OutputError("the out folder is not writable", file=self.path)

    @contextmanager
    def lock(self):
        """Hold the folder for this run; a second run on the same folder is refused."""
        path = self.path / ".amploop.lock"
        try:
            handle = open(path, "a+")
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
            yield
        finally:
            fcntl.flock(handle, fcntl.LOCK_UN)
            handle.close()

    # -- writes in the background ----------------------------------------------------------

    def later(self, relative: str, text) -> None:
        """Write a file from a background thread, so the coordinator goes on recording
        results meanwhile; ``text`` may be a string or a function that makes it.

        These are per-corner files that a rerun writes again (decks, CSVs): written in
        place, without the rename that makes results.json atomic. :meth:`flush` waits for
        all of them and raises the first error one met."""
        self._raise_write_error()
        if self._writes is None:
            self._writes = queue.Queue(maxsize=256)
            self._writer = threading.Thread(target=self._write_loop, name="amploop-writer",
                                            daemon=True)
            self._writer.start()
        self._writes.put((relative, text))

    def _write_loop(self) -> None:
        while True:
            item = self._writes.get()
            try:
                if item is None:
                    return
                if self._write_error is None:
                    relative, text = item
                    self.write_text(relative, text() if callable(text) else text, atomic=False)
            except OutputError as exc:
                self._write_error = exc
            finally:
                self._writes.task_done()

    def _raise_write_error(self) -> None:
        if self._write_error is not None:
            error, self._write_error = self._write_error, None
            raise error

    def flush(self) -> None:
        """Wait for background writes; raise the first error one of them met."""
        if self._writes is not None:
            self._writes.join()
        self._raise_write_error()

    def close(self) -> None:
        """Finish background writes and stop the writer thread."""
        if self._writes is not None:
            self._writes.join()
            self._writes.put(None)
            self._writer.join()
            self._writes = self._writer = None
        self._raise_write_error()

    def write_text(self, relative: str, text: str, *, durable: bool = False,
                   atomic: bool = True) -> Path:
        """Write ``text`` to ``relative`` inside the folder.

        ``atomic`` writes a temporary file and renames it over the target, so the file is
        whole or absent after a crash of the application; ``durable`` also forces it to
        disk first (for results.json), which survives power loss at the cost of a sync.
        """
        target = (self.path / relative).resolve()
        if self.path not in target.parents:
            raise OutputError(f"refusing to write outside the out folder: {relative!r}",
                              file=self.path)
        temporary = target.with_name(f".{target.name}.tmp{os.getpid()}") if atomic else target
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
            with open(temporary, "w", encoding="utf-8", newline="") as handle:
                handle.write(text)
                if durable:
                    handle.flush()
                    os.fsync(handle.fileno())
            if atomic:
                os.replace(temporary, target)
        except OSError as exc:
            try:
                if atomic:
                    temporary.unlink(missing_ok=True)
            except OSError:
                pass
            raise OutputError(f"cannot write {relative}: {exc.strerror or exc}", file=self.path) from None
        return target

    def write_json(self, relative: str, data: dict) -> Path:
        text = json.dumps(clean_json(data), indent=2, allow_nan=False) + "\n"
        return self.write_text(relative, text)

    def write_loop_gain_csv(self, relative: str, response: FrequencyResponse, *,
                            background: bool = False) -> None:
        """frequency_hz, magnitude_db, phase_deg, real, imag; 12 significant digits."""
        def text() -> str:
            columns = np.column_stack([response.frequency_hz, response.magnitude_db,
                                       response.phase_deg, response.values.real,
                                       response.values.imag])
            row = "%.12g,%.12g,%.12g,%.12g,%.12g\n"  # 12 digits: 1e-12, well below the analysis
            return ("frequency_hz,magnitude_db,phase_deg,real,imag\n"
                    + (row * len(columns)) % tuple(columns.ravel().tolist()))

        if background:
            self.later(relative, text)
        else:
            self.write_text(relative, text())
