"""Dask workers set up like local-pool workers: same thread limits, same numerics, same allocator.

A Dask worker process is started by a nanny, which by default puts ``MALLOC_TRIM_THRESHOLD_=65536``
into the worker's environment (Dask's ``distributed.nanny.pre-spawn-environ``). glibc reads that
variable once, at process start, and a fixed trim threshold also switches off its dynamic mmap
threshold (glibc manual, "Memory Allocation Tunables"; mallopt(3)): from then on every
allocation of 128 KiB or more is a fresh ``mmap`` whose pages fault in zeroed and every free is a
``munmap``. torch allocates and frees such blocks at every training step, so the deep detectors
ran 2.6x slower per cell than in a local-pool worker, with most of the extra time spent in the
kernel. The measurements are in the README section "Running on a cluster".

Three ways in, one setup (:func:`configure_process`):

* ``benchkit worker SCHEDULER`` starts nannies whose worker processes never get the variable,
  and preloads this module;
* ``dask worker SCHEDULER --preload benchkit.daskworker`` runs :func:`dask_setup` in each worker
  process at start-up;
* any other worker (a plain ``dask worker``) gets :class:`WorkerSetup`, a worker plug-in that
  the benchkit driver registers before it submits the first cell.

When a worker process did start with the variable, :func:`configure_process` sets glibc's
thresholds with ``mallopt`` to the ceilings of its dynamic rule, which gives back the speed of a
local-pool worker. This module imports nothing heavy at import time, so that it can set the
environment before torch's libraries load in a fresh worker.
"""

from __future__ import annotations

import ctypes
import ctypes.util
import os
import sys
from typing import Any

from distributed.diagnostics.plugin import WorkerPlugin

MALLOC_ENV = "MALLOC_TRIM_THRESHOLD_"
THREAD_ENV = ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS")
"""Thread-count variables set to 1 in every worker process (read by libraries when they load)."""

# glibc's dynamic mmap threshold grows up to DEFAULT_MMAP_THRESHOLD_MAX (32 MiB on 64-bit
# systems) and keeps the trim threshold at twice the mmap threshold (glibc malloc/malloc.c,
# from memory): these are its values once a process has freed its largest blocks.
MMAP_THRESHOLD = 32 * 2**20
TRIM_THRESHOLD = 2 * MMAP_THRESHOLD
_M_TRIM_THRESHOLD, _M_MMAP_THRESHOLD = -1, -3  # mallopt parameter numbers (<malloc.h>)

NANNY_CONFIG: dict[str, Any] = {
    # a value None removes the variable from what the nanny sets before spawning a worker
    f"distributed.nanny.pre-spawn-environ.{MALLOC_ENV}": None,
    **{f"distributed.nanny.pre-spawn-environ.{var}": 1 for var in THREAD_ENV},
}
"""Dask configuration for a process that hosts nannies (``benchkit worker``, a LocalCluster)."""

def nanny_config(mode: str = "pinned") -> dict[str, Any]:
    """:data:`NANNY_CONFIG` plus the environment of the numeric path ``mode``
    (:func:`benchkit.numerics.worker_environ`), which a worker process needs from its start."""
    from benchkit import numerics

    prefix = "distributed.nanny.pre-spawn-environ."
    pinned = {prefix + k: v for k, v in numerics.worker_environ(mode).items()}
    return {**NANNY_CONFIG, **pinned}


SCHEDULER_CONFIG: dict[str, Any] = {
    # a cell whose worker dies fails at once, as in the local pool, instead of being retried on
    # other workers (which a cell that crashes its process would kill one after another)
    "distributed.scheduler.allowed-failures": 0,
    # a worker holds only the cell it runs: a lost worker loses one cell, and long cells do not
    # wait behind each other while another worker is idle
    "distributed.scheduler.worker-saturation": 1.0,
}
"""Dask configuration for a scheduler that benchkit starts (a LocalCluster)."""

_STATE: dict[str, Any] = {}


def _restore_malloc_thresholds() -> bool:
    """Undo a fixed ``MALLOC_TRIM_THRESHOLD_`` this process started with; True if it did."""
    if MALLOC_ENV not in os.environ or not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6")
        mallopt = libc.mallopt
    except (OSError, AttributeError):  # pragma: no cover - not glibc
        return False
    ok = mallopt(_M_MMAP_THRESHOLD, MMAP_THRESHOLD) == 1
    ok = mallopt(_M_TRIM_THRESHOLD, TRIM_THRESHOLD) == 1 and ok
    del os.environ[MALLOC_ENV]  # and not passed on to processes this one starts
    return ok


def _pin_numerics() -> dict[str, Any]:
    """The pinned numerics' environment (:func:`benchkit.numerics.pin_process`), set here."""
    from benchkit import numerics

    return dict(numerics.pin_process())


def configure_process() -> dict[str, Any]:
    """Set up this worker process for benchkit cells; idempotent.

    Sets the thread-count variables (and the pinned numerics when available) before torch or
    MKL load, restores glibc's allocator thresholds if the process started with Dask's fixed
    trim threshold, and limits thread pools already loaded.

    Returns
    -------
    dict with ``environment`` (what was set), ``malloc_restored`` (bool) and
    ``torch_loaded_before`` (True when torch was imported before this ran: its numeric
    settings may then differ from a local-pool worker's).
    """
    if _STATE:
        return dict(_STATE)
    torch_before = "torch" in sys.modules
    environment = _pin_numerics()
    malloc_restored = _restore_malloc_thresholds()
    from benchkit.worker import limit_threads

    limit_threads()
    _STATE.update(
        environment=environment,
        malloc_restored=malloc_restored,
        torch_loaded_before=torch_before,
        pid=os.getpid(),
    )
    return dict(_STATE)


def dask_setup(worker: Any = None) -> None:
    """Preload hook (``dask worker --preload benchkit.daskworker``): configure the process."""
    configure_process()


class WorkerSetup(WorkerPlugin):
    """Worker plug-in that runs :func:`configure_process` on every worker, present and future."""

    name = "benchkit-worker-setup"

    def setup(self, worker: Any) -> None:
        configure_process()
