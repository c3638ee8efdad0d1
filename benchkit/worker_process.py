"""Local worker processes started fresh, with the environment their numeric path needs.

A forked worker would inherit every library the driver has loaded (and the kernel choices those
libraries made), and :mod:`multiprocessing`'s spawn re-imports the caller's main script in each
worker. So a worker here is a new interpreter (``python -m benchkit.worker_process FD``) given
its environment at exec and one end of a socket pair; it receives the driver's ``sys.path``
first (so plug-ins importable in the driver are importable in the worker), then tasks.
"""

from __future__ import annotations

import os
import subprocess
import sys
from multiprocessing.connection import Connection, Pipe
from typing import Any


class WorkerProcess:
    """The driver's handle on one worker: ``conn`` to talk to it, ``sentinel`` to wait on.

    Mirrors the parts of :class:`multiprocessing.Process` the local pool uses.
    """

    def __init__(self, env: dict[str, str], target: str) -> None:
        self.conn, child = Pipe(duplex=True)
        fd = child.fileno()
        self._popen = subprocess.Popen(
            [sys.executable, "-m", "benchkit.worker_process", str(fd), target],
            env={**os.environ, **env},
            pass_fds=(fd,),
            stdin=subprocess.DEVNULL,
        )
        child.close()
        self.pid = self._popen.pid
        self.sentinel = os.pidfd_open(self.pid)
        self.conn.send(list(sys.path))

    @property
    def exitcode(self) -> int | None:
        return self._popen.poll()

    def is_alive(self) -> bool:
        return self._popen.poll() is None

    def join(self, timeout: float | None = None) -> None:
        try:
            self._popen.wait(timeout)
        except subprocess.TimeoutExpired:
            return
        self._close_sentinel()

    def kill(self) -> None:
        if self._popen.poll() is None:
            self._popen.kill()

    def _close_sentinel(self) -> None:
        if self.sentinel is not None and self.sentinel >= 0:
            os.close(self.sentinel)
            self.sentinel = -1

    def __del__(self) -> None:  # pragma: no cover - best effort
        try:
            self._close_sentinel()
        except (OSError, AttributeError):
            pass


def _child(fd: int, target: str) -> None:
    conn = Connection(fd)
    sys.path[:] = conn.recv()
    module, _, name = target.partition(":")
    func: Any = getattr(__import__(module, fromlist=[name]), name)
    func(conn)


if __name__ == "__main__":
    _child(int(sys.argv[1]), sys.argv[2])
