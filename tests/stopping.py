"""Work for a worker process that stops it (SIGSTOP) half-way through sending its answer.

Used as a request's ``after`` (it runs in the worker, on the finished analysis): it
returns a large answer and starts a thread that watches the worker's main thread through
``/proc/self/task/<tid>/syscall`` (Linux; the kernel's view of the system call a thread
is blocked in). Once that thread is blocked in ``write`` (nr 1 on x86-64, 64 on arm64) with
the answer partly sent, the thread stops the whole process. Only the first try stops: a
marker file, created exclusively, records the stop and the worker's pid (so the test can
SIGKILL it should the coordinator not).
"""

from __future__ import annotations

import os
import platform
import signal
import threading
import time
from dataclasses import dataclass

_WRITE = {"x86_64": "1", "aarch64": "64"}.get(platform.machine(), "1")


def _stop_when_blocked_in_write(tid: int, give_up_s: float = 30.0) -> None:
    path = f"/proc/self/task/{tid}/syscall"
    end = time.monotonic() + give_up_s
    while time.monotonic() < end:
        try:
            with open(path) as handle:
                nr = handle.read().split()[0]
        except (OSError, IndexError):
            return
        if nr == _WRITE:
            os.kill(os.getpid(), signal.SIGSTOP)
            return


@dataclass(frozen=True)
class StopHalfwayThroughTheAnswer:
    """``after`` work: an answer of ``size`` bytes; the first try stops mid-send."""

    marker: str
    size: int = 32 << 20

    def __call__(self, output) -> bytes:
        try:
            fd = os.open(self.marker, os.O_CREAT | os.O_EXCL | os.O_WRONLY)
        except FileExistsError:
            return bytes(self.size)
        os.write(fd, str(os.getpid()).encode())
        os.close(fd)
        threading.Thread(target=_stop_when_blocked_in_write,
                         args=(threading.get_native_id(),), daemon=True).start()
        return bytes(self.size)
