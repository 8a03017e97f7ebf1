"""Files in the out folder: results.json, loop-gain CSVs, decks. Written atomically.

Every file is written to a temporary name in the same folder and then renamed over the
final name, so an interruption never leaves half a file behind.
"""

from __future__ import annotations

import csv
import fcntl
import io
import json
import math
import os
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

    def write_text(self, relative: str, text: str) -> Path:
        """Write ``text`` to ``relative`` inside the folder, atomically."""
        target = (self.path / relative).resolve()
        if self.path not in target.parents:
            raise OutputError(f"refusing to write outside the out folder: {relative!r}",
                              file=self.path)
        temporary = target.with_name(f".{target.name}.tmp{os.getpid()}")
        try:
            target.parent.mkdir(parents=True, exist_ok=True)
            with open(temporary, "w", encoding="utf-8", newline="") as handle:
                handle.write(text)
                handle.flush()
                os.fsync(handle.fileno())
            os.replace(temporary, target)
        except OSError as exc:
            try:
                temporary.unlink(missing_ok=True)
            except OSError:
                pass
            raise OutputError(f"cannot write {relative}: {exc.strerror or exc}", file=self.path) from None
        return target

    def write_json(self, relative: str, data: dict) -> Path:
        return self.write_text(relative, json.dumps(clean_json(data), indent=2, allow_nan=False) + "\n")

    def write_loop_gain_csv(self, relative: str, response: FrequencyResponse) -> Path:
        """frequency_hz, magnitude_db, phase_deg, real, imag; full double precision."""
        buffer = io.StringIO()
        writer = csv.writer(buffer, lineterminator="\n")
        writer.writerow(["frequency_hz", "magnitude_db", "phase_deg", "real", "imag"])
        for f, m, p, v in zip(response.frequency_hz, response.magnitude_db, response.phase_deg,
                              response.values):
            writer.writerow([repr(float(f)), repr(float(m)), repr(float(p)),
                             repr(float(v.real)), repr(float(v.imag))])
        return self.write_text(relative, buffer.getvalue())
