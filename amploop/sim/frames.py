"""Messages from a worker process, read by the coordinator without ever blocking.

``multiprocessing``'s ``Connection.recv`` returns only once a whole message has arrived:
a worker stopped (SIGSTOP, a frozen container) half-way through sending one would hang
the coordinator for good, past every time limit. Workers therefore send their answers as
frames, an 8-byte big-endian length and then the pickled message, on their connection's
socket, and the coordinator reads whatever has arrived into a buffer per worker
(:class:`FrameReader`), so it keeps watching the other workers and can give up on a
stalled one at its deadline.

Requests to a worker keep ``Connection.send`` / ``recv``, but the coordinator sends them
from a thread per worker (:class:`Sender`): a send blocks once the pipe is full, and a
deck that carries a large netlist fills it while the worker is busy with its last
analysis, or stopped.
"""

from __future__ import annotations

import os
import pickle
import queue
import struct
import threading

__all__ = ["FrameReader", "Sender", "send_frame"]

_LENGTH = struct.Struct("!Q")
_CHUNK = 1 << 20  # bytes read per look at a readable connection


def send_frame(conn, message: object) -> None:
    """Send ``message`` (picklable) on ``conn``'s socket as one frame; blocks until sent.

    Parameters
    ----------
    conn
        The worker's end of a ``multiprocessing`` pipe.
    message
        What to send.

    Raises
    ------
    OSError
        When the other end is gone.
    """
    payload = pickle.dumps(message, protocol=pickle.HIGHEST_PROTOCOL)
    data = memoryview(_LENGTH.pack(len(payload)) + payload)
    fd = conn.fileno()
    while data:
        data = data[os.write(fd, data):]


class FrameReader:
    """The coordinator's side of one worker's frames.

    Parameters
    ----------
    conn
        The coordinator's end of the worker's pipe (only this reader reads from it).
    """

    def __init__(self, conn) -> None:
        self._conn = conn
        self._buffer = bytearray()
        #: the worker's end is closed (it exited or died)
        self.closed = False

    @property
    def partial(self) -> bool:
        """Part of a frame has arrived, and not the rest."""
        return bool(self._buffer)

    def read(self) -> list[object]:
        """The messages complete after reading what has arrived; never blocks.

        Sets :attr:`closed` when the worker's end is closed (or the pipe broke).
        """
        try:
            while not self.closed and self._conn.poll(0):  # readable: a read returns at once
                chunk = os.read(self._conn.fileno(), _CHUNK)
                if chunk:
                    self._buffer += chunk
                else:
                    self.closed = True
        except OSError:
            self.closed = True
        messages = []
        while len(self._buffer) >= _LENGTH.size:
            (size,) = _LENGTH.unpack_from(self._buffer)
            end = _LENGTH.size + size
            if len(self._buffer) < end:
                break
            messages.append(pickle.loads(self._buffer[_LENGTH.size:end]))
            del self._buffer[:end]
        return messages


class Sender:
    """Messages to one worker, sent in order by a thread of their own.

    The thread also closes the connection, once :meth:`close` is called and what was
    queued before is sent (or the worker is found gone): closed from the coordinator while
    the thread writes, its descriptor's number could pass to a new pipe meanwhile.

    Parameters
    ----------
    conn
        The coordinator's end of the worker's pipe.
    """

    def __init__(self, conn) -> None:
        self._conn = conn
        self._outbox: queue.SimpleQueue = queue.SimpleQueue()
        threading.Thread(target=self._run, name="amploop-sender", daemon=True).start()

    def send(self, message: object) -> None:
        """Queue ``message`` (picklable) for the worker; returns at once."""
        self._outbox.put((message,))

    def close(self) -> None:
        """Close the connection after the messages queued so far."""
        self._outbox.put(None)

    def _run(self) -> None:
        gone = False
        while (item := self._outbox.get()) is not None:
            if gone:
                continue
            try:
                self._conn.send(item[0])
            except (OSError, ValueError):  # the worker is gone: its process sentinel says so
                gone = True
        try:
            self._conn.close()
        except OSError:
            pass
