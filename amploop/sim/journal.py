"""The journal: every finished analysis of an out folder, in SQLite, for reuse and resume.

Each analysis is keyed by a hash of everything that decides its result: the deck text,
the simulator commands, the contents of every file the deck reads, and the journal's
format version. A rerun of the same job therefore finds every analysis it already ran.
Records are committed in batches, at most ``commit_interval_s`` apart (0.5 s) and at the
end of every batch of analyses a caller runs, so an interrupted run loses at most the
analyses that were in flight and those finished in the last half second.

Only the coordinating process writes (WAL mode, ``synchronous=NORMAL``: survives a crash
of the application; explicit ``BEGIN IMMEDIATE`` transactions; the connection is opened
in the coordinator after the workers' fork server exists and is never shared with them).
Result arrays are stored as raw bytes behind a JSON header, never as pickles, so opening a
journal from elsewhere can never execute code.

Every record carries a sha256 checksum of its key and everything :meth:`Journal.get` gives
back. SQLite's own check covers its pages, not the bytes inside a stored array: bytes
damaged there would otherwise be reused as a result that looks fine. A record whose
checksum does not match is set aside: the caller recomputes it, the new record replaces
it, and :meth:`Journal.notes` says so in one line. A journal of schema 1 (written before
checksums) is upgraded in place when opened for writing; its records cannot be verified,
so they are set aside the same way, as each is asked for.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
import time
from pathlib import Path
from typing import Self
from urllib.parse import quote

import numpy as np

from amploop.bench.requests import AnalysisOutput, AnalysisRequest
from amploop.errors import JournalError

__all__ = ["JOURNAL_SCHEMA", "Journal", "analysis_key", "file_digests"]

#: Bump when the stored format changes; schema 1 is upgraded, other ones are refused.
JOURNAL_SCHEMA = 2
#: The schema that had no checksums (upgraded in place by a writer).
_UNCHECKED_SCHEMA = 1
#: Part of every key: bump when the meaning of a key changes (every old record then misses).
_KEY_VERSION = 1
_APPLICATION_ID = 0x616D706C  # "ampl"


def file_digests(paths) -> dict[str, str]:
    """sha256 of the content of each file in ``paths`` (absolute), by path; ``"missing"``
    for a file that cannot be read."""
    digests = {}
    for path in paths:
        path = Path(path)
        try:
            digests[str(path)] = hashlib.sha256(path.read_bytes()).hexdigest()
        except OSError:
            digests[str(path)] = "missing"
    return digests


def analysis_key(request: AnalysisRequest, digests: dict[str, str]) -> str:
    """The hash that identifies ``request``: deck, commands, read vectors, bundled files, and
    the contents of the files it reads as ``digests`` (path -> sha256) gives them."""
    h = hashlib.sha256()
    h.update(f"amploop-journal-{_KEY_VERSION}\n".encode())
    h.update(request.deck.encode("utf-8"))
    for step in request.steps:
        h.update(b"\0step\0" + step.command.encode() + b"\0" + "\0".join(step.read).encode())
    for path in sorted(digests):
        h.update(f"\0file\0{path}\0{digests[path]}".encode())
    for name, content in request.files:
        h.update(f"\0bundled\0{name}\0".encode() + hashlib.sha256(content.encode()).digest())
    return h.hexdigest()


def _pack(output: AnalysisOutput) -> bytes:
    """Vectors as raw little-endian bytes behind a JSON header (no pickles, no zip)."""
    header = []
    chunks = []
    for step, reads in enumerate(output.reads):
        for name, values in reads.items():
            array = np.ascontiguousarray(values)
            kind = "c16" if np.iscomplexobj(array) else "f8"
            array = array.astype("<" + kind, copy=False)
            header.append([step, name, kind, int(array.size)])
            chunks.append(array.tobytes())
    head = json.dumps({"steps": len(output.reads), "vectors": header}).encode()
    return len(head).to_bytes(4, "little") + head + b"".join(chunks)


def _record_checksum(key: str, data: bytes, warnings: str, transient_op: int,
                    seconds: float) -> str:
    """sha256 of a record's key and of every stored field :meth:`Journal.get` reads back."""
    h = hashlib.sha256()
    h.update(key.encode() + b"\0")
    h.update(data)
    h.update(f"\0{warnings}\0{int(transient_op)}\0{float(seconds)!r}".encode())
    return h.hexdigest()


def _unpack(blob: bytes, warnings: str, transient_op: int, seconds: float) -> AnalysisOutput:
    size = int.from_bytes(blob[:4], "little")
    head = json.loads(blob[4 : 4 + size])
    reads: list[dict[str, np.ndarray]] = [{} for _ in range(head["steps"])]
    offset = 4 + size
    for step, name, kind, count in head["vectors"]:
        dtype = np.dtype("<" + kind)
        end = offset + count * dtype.itemsize
        if end > len(blob):
            raise ValueError("truncated record")
        reads[step][name] = np.frombuffer(blob[offset:end], dtype=dtype).copy()
        offset = end
    return AnalysisOutput(reads=tuple(reads), warnings=tuple(json.loads(warnings)),
                          transient_op=bool(transient_op), seconds=seconds)


class Journal:
    """The journal database of one out folder.

    Parameters
    ----------
    path
        The database file (created when missing, unless ``readonly``).
    readonly
        Open for reading only (the report); never creates or changes the file.
    commit_interval_s
        Longest time, s, a recorded analysis waits for its commit (see :meth:`commit`).

    Raises
    ------
    JournalError
        If the file is not an amploop journal, is corrupt, or comes from another schema.
    """

    def __init__(self, path: str | Path, *, readonly: bool = False,
                 commit_interval_s: float = 0.5) -> None:
        self.path = Path(path)
        self.commit_interval_s = commit_interval_s
        self._open_since: float | None = None  # when the uncommitted batch began
        self.readonly = readonly
        #: (label, key, why) of every record set aside by :meth:`get`, in order
        self.set_aside: list[tuple[str, str, str]] = []
        #: records found without a checksum when this journal was upgraded from schema 1
        self.upgraded_records: int | None = None
        if readonly and not self.path.is_file():
            raise JournalError("no journal here", file=self.path,
                               hint="run measure or tune into this out folder first")
        try:
            if readonly:
                # a journal its writer closed has no -wal file: read it as it stands,
                # without the -shm/-wal files a reader would otherwise leave behind
                closed = not self.path.with_name(self.path.name + "-wal").exists()
                mode = "ro&immutable=1" if closed else "ro"
                self._db = sqlite3.connect(f"file:{quote(str(self.path))}?mode={mode}", uri=True,
                                           isolation_level=None, timeout=5.0)
            else:
                self._db = sqlite3.connect(self.path, isolation_level=None, timeout=5.0)
                self._db.execute("PRAGMA synchronous=NORMAL")  # first: fewer syncs below
                self._db.execute("PRAGMA journal_mode=WAL")
                if self._is_blank():
                    self._create()
            self._check()
        except sqlite3.DatabaseError as exc:
            self._close_quietly()
            raise JournalError(
                f"the journal is unreadable ({exc})", file=self.path,
                hint="move it away to start afresh, or use another --out folder",
            ) from None

    def _is_blank(self) -> bool:
        """No tables and no amploop marks: a new file, or one whose creation was cut short
        (a full disk leaves SQLite's first page alone)."""
        tables = self._db.execute("SELECT COUNT(*) FROM sqlite_master").fetchone()[0]
        app = self._db.execute("PRAGMA application_id").fetchone()[0]
        version = self._db.execute("PRAGMA user_version").fetchone()[0]
        return tables == 0 and app == 0 and version == 0

    def _create(self) -> None:
        self._db.execute("BEGIN IMMEDIATE")
        self._db.execute(f"PRAGMA application_id={_APPLICATION_ID}")
        self._db.execute(f"PRAGMA user_version={JOURNAL_SCHEMA}")
        self._db.execute(
            "CREATE TABLE analyses (key TEXT PRIMARY KEY, label TEXT NOT NULL, "
            "created REAL NOT NULL, seconds REAL NOT NULL, ac_runs INTEGER NOT NULL, "
            "transient_op INTEGER NOT NULL, warnings TEXT NOT NULL, data BLOB NOT NULL, "
            "checksum TEXT)"  # NULL only in records of an upgraded schema-1 journal
        )
        self._db.execute("COMMIT")

    def _upgrade(self) -> None:
        """Schema 1 -> 2: add the checksum column; the old records keep none."""
        self._db.execute("BEGIN IMMEDIATE")
        try:
            self._db.execute("ALTER TABLE analyses ADD COLUMN checksum TEXT")
            self._db.execute(f"PRAGMA user_version={JOURNAL_SCHEMA}")
            self.upgraded_records = self._db.execute(
                "SELECT COUNT(*) FROM analyses").fetchone()[0]
            self._db.execute("COMMIT")
        except sqlite3.Error:
            self._db.execute("ROLLBACK")
            raise

    def _check(self) -> None:
        app = self._db.execute("PRAGMA application_id").fetchone()[0]
        version = self._db.execute("PRAGMA user_version").fetchone()[0]
        if app != _APPLICATION_ID:
            raise JournalError("this file is not an amploop journal", file=self.path,
                               hint="use another --out folder")
        if version == _UNCHECKED_SCHEMA and self.readonly:
            raise JournalError(
                f"the journal has schema {version}, whose records carry no checksum",
                file=self.path, hint="rerun measure or tune into this out folder: it "
                "upgrades the journal and recomputes what cannot be verified")
        if version == _UNCHECKED_SCHEMA:
            self._upgrade()
        elif version != JOURNAL_SCHEMA:
            raise JournalError(
                f"the journal has schema {version}; this amploop writes schema {JOURNAL_SCHEMA}",
                file=self.path,
                hint="rerun with a new --out folder (or delete the journal to start afresh)",
            )
        integrity = self._db.execute("PRAGMA quick_check").fetchone()[0]
        if integrity != "ok":
            raise JournalError(f"the journal is corrupt ({integrity})", file=self.path,
                               hint="move it away to start afresh")

    def get(self, key: str) -> AnalysisOutput | None:
        """The stored output of analysis ``key``, or None.

        A record whose checksum does not match (or that has none, from schema 1, or
        cannot be unpacked) is damaged: it is never returned. A writer sets it aside
        (None, and an entry in :attr:`set_aside`), so that the caller recomputes it and
        :meth:`put` replaces it.

        Parameters
        ----------
        key
            The analysis's key (:func:`analysis_key`).

        Raises
        ------
        JournalError
            When the journal is read-only (nothing could recompute it) and the record is
            damaged.
        """
        row = self._db.execute(
            "SELECT data, warnings, transient_op, seconds, checksum, label FROM analyses "
            "WHERE key = ?", (key,)
        ).fetchone()
        if row is None:
            return None
        data, warnings, transient_op, seconds, checksum, label = row
        if checksum is None:
            why = "no checksum (recorded by an older amploop)"
        elif checksum != _record_checksum(key, data, warnings, transient_op, seconds):
            why = "checksum mismatch"
        else:
            try:
                return _unpack(data, warnings, transient_op, seconds)
            except (ValueError, OSError, KeyError, IndexError, TypeError) as exc:
                why = f"unreadable ({exc})"
        if self.readonly:
            raise JournalError(f"the stored analysis of {label} ({key[:12]}…) is damaged: {why}",
                               file=self.path,
                               hint="rerun the command into this out folder to recompute it")
        self.set_aside.append((label, key, why))
        return None

    def notes(self) -> tuple[str, ...]:
        """One line for the user about the records set aside (and one about an upgrade)."""
        lines = []
        if self.upgraded_records is not None:
            lines.append(f"the journal was upgraded from schema {_UNCHECKED_SCHEMA}: its "
                         f"{self.upgraded_records} records carry no checksum, so each is "
                         "recomputed when it is needed")
        damaged = [(label, key, why) for label, key, why in self.set_aside
                   if not why.startswith("no checksum")]
        if damaged:
            shown = ", ".join(f"{label} ({why})" for label, _, why in damaged[:5])
            more = f" and {len(damaged) - 5} more" if len(damaged) > 5 else ""
            lines.append(f"{len(damaged)} damaged journal record{'s' * (len(damaged) != 1)} "
                         f"recomputed: {shown}{more}")
        return tuple(lines)

    def put(self, key: str, label: str, request: AnalysisRequest, output: AnalysisOutput) -> None:
        """Record a finished analysis.

        It is committed with its batch: by the first ``put`` more than
        ``commit_interval_s`` after the batch began, by :meth:`commit`, or by :meth:`close`.

        Parameters
        ----------
        key
            The analysis's key (:func:`analysis_key`); a record with the same key is
            replaced.
        label
            What the analysis belongs to (the request's label), kept beside it.
        request
            The request that was run (its count of AC analyses is kept).
        output
            What it gave back: the vectors, the warnings, whether the operating point
            needed the transient fallback, and its seconds.
        """
        blob = _pack(output)
        warnings = json.dumps(list(output.warnings))
        checksum = _record_checksum(key, blob, warnings, int(output.transient_op), output.seconds)
        try:
            if self._open_since is None:
                self._db.execute("BEGIN IMMEDIATE")
                self._open_since = time.monotonic()
            self._db.execute(
                "INSERT OR REPLACE INTO analyses VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (key, label, time.time(), output.seconds, request.ac_runs,
                 int(output.transient_op), warnings, blob, checksum),
            )
        except sqlite3.Error as exc:
            self._failed(exc)
        if time.monotonic() - self._open_since >= self.commit_interval_s:
            self.commit()

    def commit(self) -> None:
        """Make every recorded analysis durable (against a crash of the application)."""
        if not self._db.in_transaction:
            # nothing open; also when Ctrl-C came between a COMMIT and the line after it,
            # or between a BEGIN and the line after it (SQLite knows, the bookkeeping not)
            self._open_since = None
            return
        try:
            self._db.execute("COMMIT")
            self._open_since = None
        except sqlite3.Error as exc:
            self._failed(exc)

    def _failed(self, exc: sqlite3.Error):
        try:
            self._db.execute("ROLLBACK")
        except sqlite3.Error:
            pass
        self._open_since = None
        raise JournalError(f"cannot record an analysis: {exc}", file=self.path,
                           hint="is the disk full? analyses committed so far are kept") from None

    def count(self) -> int:
        """How many analyses are recorded."""
        return self._db.execute("SELECT COUNT(*) FROM analyses").fetchone()[0]

    def _close_quietly(self) -> None:
        try:
            self._db.close()
        except (sqlite3.Error, AttributeError):
            pass

    def close(self) -> None:
        """Commit what is recorded, then close."""
        try:
            self.commit()
        finally:
            self._close_quietly()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc) -> None:
        self.close()
