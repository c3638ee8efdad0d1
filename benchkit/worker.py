"""What runs inside a worker process, whichever executor started it: one cell with its limits.

:func:`execute_task` runs one :class:`~benchkit.protocol.CellTask` in the calling thread and never
raises: a cell that raises, returns bad scores or runs past its time limit becomes a ``failed`` or
``timeout`` result with its message.

Time limits: a watcher thread raises :class:`CellTimeout` in the thread running the cell at the
limit, and again every half second until the cell stops (this interrupts Python code between
bytecodes, not a single long C call).

Threads and numerics: every cell runs with one BLAS/OpenMP thread and one torch thread, in every
executor, on the numeric path its spec asks for (:mod:`benchkit.numerics`), so that a cell's
result does not depend on where or beside what it ran. A worker that is not on that path (its
environment came after its libraries loaded) fails its cells with a message saying so.
"""

from __future__ import annotations

import ctypes
import math
import os
import sys
import threading
import traceback
from collections.abc import Callable
from pathlib import Path
from typing import Any

from benchkit import numerics, registry
from benchkit.data.model import Entity
from benchkit.protocol import CellResult, CellTask, PeakMemory, run_cell

RESEND_SECONDS = 0.5


class CellTimeout(BaseException):
    """Raised inside a cell's thread when it runs past its time limit.

    A BaseException, so that a detector's own ``except Exception`` cannot swallow it.
    """


def _raise_in_thread(thread_id: int, exc: type[BaseException] | None) -> None:
    ctypes.pythonapi.PyThreadState_SetAsyncExc(
        ctypes.c_ulong(thread_id), ctypes.py_object(exc) if exc is not None else None
    )


def _call_with_limit(fn: Callable[[], CellResult], limit: float) -> CellResult:
    """Run ``fn`` in this thread; raise CellTimeout in it once ``limit`` seconds have passed.

    The exception is sent again every :data:`RESEND_SECONDS` until ``fn`` ends, because an
    exception that lands in a callback (a garbage-collector hook, a ``__del__``) is swallowed
    there. A cell that ran past its limit is a timeout even if it then returned normally.
    """
    if not math.isfinite(limit):
        return fn()
    thread_id = threading.get_ident()
    lock = threading.Lock()
    finished = threading.Event()
    fired = False

    def watch() -> None:
        nonlocal fired
        wait = limit
        while not finished.wait(wait):
            with lock:
                if finished.is_set():
                    return
                fired = True
                _raise_in_thread(thread_id, CellTimeout)
            wait = RESEND_SECONDS

    watcher = threading.Thread(target=watch, daemon=True)
    watcher.start()
    try:
        result = fn()
    finally:
        with lock:
            finished.set()
            if fired:
                _raise_in_thread(thread_id, None)  # drop an exception not delivered yet
    if fired:
        raise CellTimeout
    return result


def _ignore_swallowed_timeouts(unraisable: Any, _default: Any = sys.unraisablehook) -> None:
    """``sys.unraisablehook``: stay silent about a CellTimeout that a callback swallowed."""
    if not isinstance(unraisable.exc_value, CellTimeout):
        _default(unraisable)


def limit_threads() -> None:
    """One thread in every BLAS/OpenMP pool loaded in this process, and one torch thread."""
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    if "torch" in sys.modules:
        torch = sys.modules["torch"]
        if torch.get_num_threads() != 1:
            torch.set_num_threads(1)


_ENTERED: dict[str, dict[str, str]] = {}  # numerics mode -> observed path, once per process


def enter_numerics(mode: str) -> dict[str, str]:
    """:func:`benchkit.numerics.enter_worker` once per process and mode (it raises
    :class:`~benchkit.numerics.NumericsMismatch` for a worker off the pinned path)."""
    if mode not in _ENTERED:
        _ENTERED[mode] = numerics.enter_worker(mode)
    return _ENTERED[mode]


def execute_task(task: CellTask, entity: Entity | None = None) -> CellResult:
    """Run one task in this thread and never raise: failures become a failed or timeout result."""
    for var, value in numerics.worker_environ(task.numerics).items():
        os.environ.setdefault(var, value)  # read by libraries loaded later, if not loaded yet
    if entity is not None:
        task.entity = entity
    sys.unraisablehook = _ignore_swallowed_timeouts
    if task.cached_scores is None:
        try:  # import the detector (and the registry's built-ins) outside the time limit
            registry.get(task.detector)
            enter_numerics(task.numerics)
        except Exception as exc:
            return CellResult(task.key, "failed", error=describe_error(exc))
    limit_threads()  # after the imports: torch may have just been loaded
    memory = PeakMemory()
    try:
        with memory:
            result = _call_with_limit(lambda: run_cell(task), task.time_limit)
    except CellTimeout:
        return CellResult(
            task.key, "timeout", error=f"cell ran past its time limit of {task.time_limit:g} s"
        )
    except Exception as exc:  # failure isolation: any plug-in error fails only this cell
        return CellResult(task.key, "failed", error=describe_error(exc))
    if not result.evaluated_only:
        result.measures["peak_memory_mb"] = memory.mb
    return result


def describe_error(exc: BaseException) -> str:
    """``Type: message`` plus the innermost frame, on one line."""
    frames = traceback.extract_tb(exc.__traceback__)
    where = f" (at {Path(frames[-1].filename).name}:{frames[-1].lineno})" if frames else ""
    text = str(exc).strip().replace("\n", " ")
    return f"{type(exc).__name__}: {text}{where}"
