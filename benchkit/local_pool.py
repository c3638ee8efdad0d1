"""The local executor: a pool of worker processes on this machine, fed through pipes.

Workers are fresh interpreters (:class:`~benchkit.worker_process.WorkerProcess`) started with
the environment of the spec's numeric path (:mod:`benchkit.numerics`), since the libraries read
it only when they load; the driver's own environment and libraries are left as they were.

A worker that dies (a crash in native code, the OOM killer) fails its cell; one still busy a grace
period past the cell's time limit is killed (status ``timeout``) and a fresh one takes its place.
"""

from __future__ import annotations

import math
import os
import threading
import time
from collections import deque
from collections.abc import Iterable, Iterator
from multiprocessing.connection import wait
from typing import Any

from benchkit import numerics, registry
from benchkit.protocol import CellResult, CellTask
from benchkit.worker import enter_numerics, execute_task
from benchkit.worker_process import WorkerProcess

READY = "ready"
START_SECONDS = 300.0  # a worker that has not loaded its libraries by then is replaced


def hard_kill_grace(limit: float) -> float:
    """Seconds past a cell's time limit after which the local pool kills its worker process:
    the limit itself, between 1 and 5 seconds."""
    return max(1.0, min(5.0, limit))


def _worker_main(conn: Any) -> None:
    """Loop of a local worker process: receive a task, send its result, until told to stop."""
    parent = os.getppid()

    def watch_parent() -> None:
        # a SIGKILLed driver must not leave workers behind: the kernel re-parents them at once
        # (even while the dead driver is not reaped yet), so a changed parent means it is gone
        while os.getppid() == parent:
            time.sleep(0.25)
        os._exit(1)

    threading.Thread(target=watch_parent, daemon=True).start()
    mode = os.environ.get("BENCHKIT_WORKER_NUMERICS", numerics.DEFAULT_MODE)
    try:  # load the built-ins once, on the numeric path set at the worker's start
        for module in registry.BUILTIN_MODULES:
            __import__(module)
        enter_numerics(mode)
    except Exception:  # noqa: S110 - each cell reports such a failure itself
        pass
    conn.send(READY)  # cells' time limits start only now, not while the worker loads
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            return
        if message is None:
            return
        conn.send(execute_task(message))


class _Worker:
    def __init__(self, mode: str) -> None:
        self.mode = mode
        env = {**numerics.worker_environ(mode), "BENCHKIT_WORKER_NUMERICS": mode}
        self.process = WorkerProcess(env, "benchkit.local_pool:_worker_main")
        self.conn = self.process.conn
        self.task: CellTask | None = None
        self.deadline = 0.0
        self.ready = False
        self.start_deadline = time.monotonic() + START_SECONDS

    def kill(self) -> None:
        """Stop the process at once (it may be stuck in native code)."""
        self.process.kill()
        self.process.join(5)
        self.conn.close()


def run_local(tasks: Iterable[CellTask], workers: int) -> Iterator[CellResult]:
    """Run tasks on ``workers`` local processes; yield results as they finish.

    The workers start at once, before the caller starts a progress bar (or any other thread).
    A worker that dies (a crash in native code, the OOM killer) fails its cell; one still
    busy a grace period (:func:`hard_kill_grace`) past the cell's time limit is killed
    (status ``timeout``). Either way a fresh worker takes its place.
    """
    queue = deque(tasks)
    if not queue:
        return iter(())
    mode = queue[0].numerics
    pool = [_Worker(mode) for _ in range(max(1, min(workers, len(queue))))]
    return _drive(pool, queue)


def _drive(pool: list[_Worker], queue: deque) -> Iterator[CellResult]:
    try:
        while True:
            for i, w in enumerate(pool):
                if w.ready and w.task is None and queue:
                    pool[i] = _dispatch(w, queue)
            busy = [w for w in pool if w.task is not None]
            starting = [w for w in pool if not w.ready]
            if not busy and not (starting and queue):
                return
            watched = busy + starting
            first = min([w.deadline for w in busy] + [w.start_deadline for w in starting])
            timeout = max(0.0, first - time.monotonic()) if math.isfinite(first) else None
            ready = set(wait([w.conn for w in watched] + [w.process.sentinel for w in watched],
                             timeout))  # fmt: skip
            for i, w in enumerate(pool):
                if not w.ready:
                    failed = _start_check(w, ready, queue)
                    if failed is not None:
                        pool[i] = _Worker(w.mode)
                        yield failed
                    continue
                if w.task is None:
                    continue
                result, replace = _collect(w, ready)
                if result is None:
                    continue
                w.task = None
                if replace:
                    w.kill()
                    if queue:
                        pool[i] = _Worker(w.mode)
                yield result
    finally:
        _shut_down(pool)


def _start_check(w: _Worker, ready: set, queue: deque) -> CellResult | None:
    """Mark a starting worker ready when it says so. One that died or took too long to start is
    killed, and the next queued cell fails with the reason (so a worker that cannot start
    cannot loop forever); returns that failed result, else None."""
    if w.conn in ready:
        try:
            if w.conn.recv() == READY:
                w.ready = True
                return None
        except (EOFError, OSError):
            pass
    elif w.process.sentinel not in ready and time.monotonic() < w.start_deadline:
        return None
    w.kill()
    if not queue:
        return None
    task = queue.popleft()
    return CellResult(task.key, "failed",
                      error=f"worker process could not start (exit code {w.process.exitcode})")


def _dispatch(w: _Worker, queue: deque) -> _Worker:
    """Send the next queued task to ready idle worker ``w``; a worker that died while idle is
    replaced instead (the task waits until the new one is ready)."""
    if not w.process.is_alive():
        w.kill()
        return _Worker(w.mode)
    task = queue.popleft()
    try:
        w.conn.send(task)
    except OSError:  # it died just now: the task waits for a fresh worker
        queue.appendleft(task)
        w.kill()
        return _Worker(w.mode)
    w.task = task
    w.deadline = time.monotonic() + task.time_limit + hard_kill_grace(task.time_limit)
    return w


def _collect(w: _Worker, ready: set) -> tuple[CellResult | None, bool]:
    """The result of a busy worker if there is one now, and whether to replace the worker."""
    task = w.task
    assert task is not None
    if w.conn in ready:
        try:
            return w.conn.recv(), False
        except (EOFError, OSError):
            pass
    if w.conn in ready or w.process.sentinel in ready:
        w.process.join(5)
        return CellResult(
            task.key, "failed", error=f"worker process died (exit code {w.process.exitcode})"
        ), True
    if time.monotonic() >= w.deadline:
        return CellResult(
            task.key,
            "timeout",
            error=f"cell ran past its time limit of {task.time_limit:g} s; "
            "its worker process was killed",
        ), True
    return None, False


def _shut_down(pool: list[_Worker]) -> None:
    for w in pool:
        if w.process.is_alive():
            try:
                w.conn.send(None)
            except OSError:
                pass
    for w in pool:
        w.process.join(2)
        if w.process.is_alive():
            w.process.kill()
            w.process.join(2)
