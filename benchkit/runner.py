"""Run an experiment: expand the grid, skip cached cells, execute the rest, write the store.

Cells run in worker processes: a local pool (default; one worker per available core) or Dask
distributed. Only this driver writes the store. A cell that raises, returns bad scores or runs
past its time limit is recorded as ``failed`` or ``timeout`` with its message; the other cells go
on. Running the same spec into the same OUT again computes only what is missing (``ok`` cells
are reused; failed and timed-out cells are tried again), and cells whose metric or threshold
settings changed get their metrics recomputed from the cached scores.

Time limits: a watcher thread in the worker raises :class:`CellTimeout` in the thread running
the cell at the limit, and again every half second until the cell stops (this interrupts Python
code between bytecodes, not a single long C call). The local pool also kills a worker that is
still busy a grace period after the limit and starts a fresh one; Dask has no such hard stop, so
there a cell stuck in one C call is marked ``timeout`` only when that call returns.

Threads: every cell runs with one BLAS/OpenMP thread and one torch thread, in every executor, so
that a cell's result does not depend on where or beside what it ran.
"""

from __future__ import annotations

import contextlib
import ctypes
import math
import multiprocessing
import os
import sys
import threading
import time
import traceback
from collections import deque
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from multiprocessing.connection import wait
from pathlib import Path
from typing import Any

from benchkit import registry
from benchkit.data.model import Dataset, Entity
from benchkit.errors import BenchkitInputError, DataError, SpecError
from benchkit.protocol import (
    PROTOCOL_VERSION,
    CellResult,
    CellTask,
    Evaluation,
    PeakMemory,
    canonical_json,
    cell_key,
    run_cell,
)
from benchkit.spec import DetectorSpec, ExperimentSpec
from benchkit.store import CellRecord, Store, writer_lock


def hard_kill_grace(limit: float) -> float:
    """Seconds past a cell's time limit after which the local pool kills its worker process:
    the limit itself, between 1 and 5 seconds."""
    return max(1.0, min(5.0, limit))


# ------------------------------------------------------------------------------- the grid


@dataclass
class PlannedCell:
    """One cell of the grid, with what the store needs to describe it."""

    key: str
    variant: str
    detector: DetectorSpec
    params: dict[str, Any]
    dataset: str
    entity: Entity
    entity_fingerprint: str
    seed: int
    perturbation: Any

    def record(self, scaling: str, result: CellResult) -> CellRecord:
        p = self.perturbation
        return CellRecord(
            cell_key=self.key,
            detector=self.detector.name,
            params=canonical_json(self.params),
            dataset=self.dataset,
            entity=self.entity.name,
            entity_fingerprint=self.entity_fingerprint,
            seed=self.seed,
            perturbation=p.key(),
            noise_kind=p.kind,
            noise_level=float(p.level),
            noise_apply=p.apply_to,
            scaling=scaling,
            protocol_version=PROTOCOL_VERSION,
            status=result.status,
            error=result.error,
            measures=result.measures,
            evaluation=result.evaluation,
        )


def load_datasets(spec: ExperimentSpec, data_root: str | Path | None = None) -> list[Dataset]:
    """Load every ``[[datasets]]`` entry (entity subsets applied, display names set).

    ``data_root`` fills ``{data_root}`` in dataset TOML paths (the loader falls back to
    ``$BENCHKIT_DATA_ROOT``). Errors are prefixed with the entry's key path.
    """
    from benchkit.data import load

    out: list[Dataset] = []
    names: dict[str, int] = {}
    for i, d in enumerate(spec.datasets):
        options = dict(d.options)
        if data_root is not None:
            options.setdefault("data_root", str(data_root))
        try:
            dataset = load(spec.resolve_source(d.source), **options)
        except DataError as exc:
            raise DataError(f"datasets[{i}]: {exc}") from None
        if d.entities:
            available = [e.name for e in dataset.entities]
            for j, name in enumerate(d.entities):
                if name not in available:
                    raise SpecError(
                        f"datasets[{i}].entities[{j}]: no entity {name!r} in {d.source!r}; "
                        f"available: {', '.join(available)}"
                    )
            dataset = Dataset(
                dataset.name, [dataset.entity(n) for n in d.entities], dataset.source, dataset.notes
            )
        if d.name:
            dataset = Dataset(d.name, dataset.entities, dataset.source, dataset.notes)
        if dataset.name in names:
            raise SpecError(
                f"datasets[{i}]: dataset name {dataset.name!r} is already used by "
                f"datasets[{names[dataset.name]}]; set a distinct name"
            )
        names[dataset.name] = i
        out.append(dataset)
    return out


def expand_grid(spec: ExperimentSpec, datasets: list[Dataset]) -> list[PlannedCell]:
    """Every (entity, detector variant, seed, perturbation) of the spec, in a stable order."""
    cells: dict[str, PlannedCell] = {}
    perturbations = spec.perturbations
    for dataset in datasets:
        for entity in dataset.entities:
            fingerprint = entity.fingerprint()
            for det in spec.detectors:
                for seed in spec.seeds:
                    params = dict(det.resolved)
                    if det.takes_seed:
                        params["seed"] = seed
                    for p in perturbations:
                        key = cell_key(
                            det.name, params, fingerprint, entity.name, seed, p.key(), spec.scaling
                        )
                        # the same data listed twice gives the same cell: keep the first
                        cells.setdefault(
                            key,
                            PlannedCell(
                                key,
                                det.label,
                                det,
                                params,
                                dataset.name,
                                entity,
                                fingerprint,
                                seed,
                                p,
                            ),
                        )
    return list(cells.values())


# ------------------------------------------------------------------------------- in the worker


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


def _limit_threads() -> None:
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)
    if "torch" in sys.modules:
        torch = sys.modules["torch"]
        if torch.get_num_threads() != 1:
            torch.set_num_threads(1)


def execute_task(task: CellTask, entity: Entity | None = None) -> CellResult:
    """Run one task in this thread and never raise: failures become a failed or timeout result."""
    for var in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
        os.environ[var] = "1"  # read by libraries imported later (torch reads it at import)
    if entity is not None:
        task.entity = entity
    sys.unraisablehook = _ignore_swallowed_timeouts
    if task.cached_scores is None:
        try:  # import the detector (and the registry's built-ins) outside the time limit
            registry.get(task.detector)
        except Exception as exc:
            return CellResult(task.key, "failed", error=_describe(exc))
    _limit_threads()  # after the imports: torch may have just been loaded
    memory = PeakMemory()
    try:
        with memory:
            result = _call_with_limit(lambda: run_cell(task), task.time_limit)
    except CellTimeout:
        return CellResult(
            task.key, "timeout", error=f"cell ran past its time limit of {task.time_limit:g} s"
        )
    except Exception as exc:  # failure isolation: any plug-in error fails only this cell
        return CellResult(task.key, "failed", error=_describe(exc))
    if not result.evaluated_only:
        result.measures["peak_memory_mb"] = memory.mb
    return result


def _describe(exc: BaseException) -> str:
    """``Type: message`` plus the innermost frame, on one line."""
    frames = traceback.extract_tb(exc.__traceback__)
    where = f" (at {Path(frames[-1].filename).name}:{frames[-1].lineno})" if frames else ""
    text = str(exc).strip().replace("\n", " ")
    return f"{type(exc).__name__}: {text}{where}"


# ------------------------------------------------------------------------------- local pool


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
    while True:
        try:
            message = conn.recv()
        except (EOFError, OSError):
            return
        if message is None:
            return
        conn.send(execute_task(message))


class _Worker:
    def __init__(self, ctx: Any) -> None:
        self.conn, child = ctx.Pipe()
        self.process = ctx.Process(target=_worker_main, args=(child,), daemon=True)
        self.process.start()
        child.close()
        self.task: CellTask | None = None
        self.deadline = 0.0

    def kill(self) -> None:
        """Stop the process at once (it may be stuck in native code)."""
        self.process.kill()
        self.process.join(5)
        self.conn.close()


def _context() -> Any:
    """Fork on Linux (workers inherit the imported harness and detectors at no cost); elsewhere
    a fork server that has imported them once."""
    if sys.platform.startswith("linux"):
        return multiprocessing.get_context("fork")
    try:  # pragma: no cover - not on Linux
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(["benchkit.runner", *registry.BUILTIN_MODULES])
        return ctx
    except ValueError:  # pragma: no cover - platforms without forkserver
        return multiprocessing.get_context("spawn")


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
    ctx = _context()
    pool = [_Worker(ctx) for _ in range(max(1, min(workers, len(queue))))]
    return _drive(ctx, pool, queue)


def _drive(ctx: Any, pool: list[_Worker], queue: deque) -> Iterator[CellResult]:
    try:
        while True:
            for i, w in enumerate(pool):
                if w.task is None and queue:
                    pool[i] = _dispatch(ctx, w, queue.popleft())
            busy = [w for w in pool if w.task is not None]
            if not busy:
                return
            first_deadline = min(w.deadline for w in busy)
            timeout = (
                max(0.0, first_deadline - time.monotonic())
                if math.isfinite(first_deadline)
                else None
            )
            ready = set(wait([w.conn for w in busy] + [w.process.sentinel for w in busy], timeout))
            for i, w in enumerate(pool):
                if w.task is None:
                    continue
                result, replace = _collect(w, ready)
                if result is None:
                    continue
                w.task = None
                if replace:
                    w.kill()
                    if queue:
                        pool[i] = _Worker(ctx)
                yield result
    finally:
        _shut_down(pool)


def _dispatch(ctx: Any, w: _Worker, task: CellTask) -> _Worker:
    """Send ``task`` to idle worker ``w`` (replaced first if it died while idle)."""
    if not w.process.is_alive():
        w.kill()
        w = _Worker(ctx)
    try:
        w.conn.send(task)
    except OSError:  # it died just now: one fresh worker, one more try
        w.kill()
        w = _Worker(ctx)
        w.conn.send(task)
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


# ------------------------------------------------------------------------------- dask


class DaskSession:
    """Cells on Dask distributed: the cluster at ``scheduler``, or a LocalCluster on loopback.

    A scheduler address is connected to at once, so that a wrong address fails before anything
    is written; a local cluster starts only when there is something to run.
    """

    def __init__(self, workers: int, scheduler: str | None) -> None:
        from distributed import Client

        self.workers, self.cluster, self.client = workers, None, None
        if scheduler:
            try:
                self.client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError, ValueError) as exc:  # ValueError: malformed address
                raise BenchkitInputError(
                    f"--scheduler {scheduler}: cannot connect: {exc}"
                ) from None

    def _connect(self) -> Any:
        if self.client is None:
            import logging

            from distributed import Client, LocalCluster

            self.cluster = LocalCluster(
                n_workers=max(1, self.workers),
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address=None,
                silence_logs=logging.ERROR,
            )
            self.client = Client(self.cluster)
        return self.client

    def run(self, tasks: Iterable[CellTask]) -> Iterator[CellResult]:
        """Submit every task (each entity sent to the cluster once); yield results as they end."""
        from distributed import as_completed

        tasks = list(tasks)
        if not tasks:
            return
        client = self._connect()
        scattered: dict[int, Any] = {}
        futures = {}
        for task in tasks:
            entity = task.entity
            if id(entity) not in scattered:
                scattered[id(entity)] = client.scatter(entity, hash=False)
            bare = CellTask(**{**task.__dict__, "entity": None})
            fut = client.submit(execute_task, bare, scattered[id(entity)], pure=False, retries=0)
            futures[fut] = task
        for fut in as_completed(list(futures)):
            task = futures[fut]
            try:
                result = fut.result()
            except Exception as exc:  # a worker lost mid-cell, for example
                result = CellResult(task.key, "failed", error=f"dask: {_describe(exc)}")
            yield result

    def close(self) -> None:
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()

    def __enter__(self) -> DaskSession:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


# ------------------------------------------------------------------------------- the driver


@dataclass
class RunSummary:
    """What a run did; ``failures`` lists ``(variant, dataset, entity, seed, perturbation,
    status, error)`` of every cell that did not end ``ok``."""

    out: Path
    run_id: int
    n_cells: int
    n_computed: int = 0
    n_cached: int = 0
    n_rescored: int = 0
    n_failed: int = 0
    n_timeout: int = 0
    seconds: float = 0.0
    failures: list[tuple] = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return self.n_failed == 0 and self.n_timeout == 0

    def as_dict(self) -> dict[str, Any]:
        return {
            "n_cells": self.n_cells,
            "n_computed": self.n_computed,
            "n_cached": self.n_cached,
            "n_rescored": self.n_rescored,
            "n_failed": self.n_failed,
            "n_timeout": self.n_timeout,
            "seconds": round(self.seconds, 3),
        }


def available_cores() -> int:
    """CPU cores this process may use."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not on Linux
        return max(1, os.cpu_count() or 1)


def environment() -> dict[str, Any]:
    """Package versions, Python, platform, cores and the git revision of the checkout if any."""
    import platform
    import subprocess
    from importlib.metadata import PackageNotFoundError, version

    packages = {}
    for name in (
        "benchkit",
        "numpy",
        "scipy",
        "pandas",
        "scikit-learn",
        "pyod",
        "tslearn",
        "torch",
        "dask",
        "distributed",
    ):
        try:
            packages[name] = version(name)
        except PackageNotFoundError:
            packages[name] = None
    env: dict[str, Any] = {
        "packages": packages,
        "python": sys.version.split()[0],
        "implementation": platform.python_implementation(),
        "platform": platform.platform(),
        "machine": platform.machine(),
        "cores": available_cores(),
        "git_revision": None,
        "git_dirty": None,
    }
    here = Path(__file__).resolve().parent
    try:
        rev = subprocess.run(
            ["git", "-C", str(here), "rev-parse", "HEAD"],
            capture_output=True,
            text=True,
            timeout=5,
            check=True,
        ).stdout.strip()
        dirty = subprocess.run(
            ["git", "-C", str(here), "status", "--porcelain", "--untracked-files=no"],
            capture_output=True,
            text=True,
            timeout=5,
            check=True,
        ).stdout
        env["git_revision"], env["git_dirty"] = rev or None, bool(dirty.strip())
    except (OSError, subprocess.SubprocessError):
        pass
    return env


def _progress(total: int, initial: int, quiet: bool) -> Any:
    from tqdm import tqdm

    disable = quiet or not sys.stderr.isatty()
    return tqdm(
        total=total,
        initial=initial,
        disable=disable,
        unit="cell",
        desc="cells",
        dynamic_ncols=True,
        file=sys.stderr,
    )


def run_experiment(
    spec: ExperimentSpec,
    out: Path | str,
    *,
    executor: str | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    quiet: bool = False,
    data_root: str | Path | None = None,
) -> RunSummary:
    """Run ``spec`` into results folder ``out`` and return what happened.

    Parameters
    ----------
    spec : a validated experiment spec.
    out : results folder (created if missing; an existing one is resumed).
    executor : ``"local"`` or ``"dask"``; ``None`` takes the spec's ``execution.executor``.
    workers : worker processes; ``None`` or 0 takes the spec's, whose 0 means available cores.
    scheduler : Dask scheduler address; ``None`` takes the spec's (empty = local cluster).
    quiet : no progress bar (it is also off when stderr is not a terminal).
    data_root : root folder for dataset TOMLs that need one (else ``$BENCHKIT_DATA_ROOT``).
    """
    executor = executor or spec.execution.executor
    if executor not in ("local", "dask"):
        raise SpecError(f"executor: expected one of local, dask, got {executor!r}")
    workers = workers or spec.execution.workers or available_cores()
    scheduler = scheduler if scheduler is not None else (spec.execution.scheduler or None)
    started = time.perf_counter()
    datasets = load_datasets(spec, data_root)
    plan = expand_grid(spec, datasets)
    out = Path(out)
    evaluation = Evaluation(spec.thresholds, dict(spec.metrics))
    fingerprints = {(d.name, e.name): e.fingerprint() for d in datasets for e in d.entities}
    with contextlib.ExitStack() as stack:
        session = (
            stack.enter_context(DaskSession(workers, scheduler)) if executor == "dask" else None
        )
        stack.enter_context(writer_lock(out))
        store = stack.enter_context(Store(out, create=True))
        store.remove_partial_files()
        grid = [(c.key, c.variant) for c in plan]
        run_id = store.begin_run(spec.name, spec.to_toml(), spec.to_dict(), environment(),
                                 fingerprints, grid)  # fmt: skip
        summary = RunSummary(out=out, run_id=run_id, n_cells=len(plan))
        tasks = _tasks(store, plan, spec, evaluation, summary)
        results = session.run(tasks) if session is not None else run_local(tasks, workers)
        bar = _progress(summary.n_cells, summary.n_cached, quiet)
        by_key = {cell.key: cell for cell in plan}
        try:
            for result in results:
                _record(store, run_id, by_key[result.key], spec.scaling, result, summary)
                bar.update(1)
                bar.set_postfix(done=summary.n_computed + summary.n_rescored,
                                cached=summary.n_cached,
                                failed=summary.n_failed + summary.n_timeout)  # fmt: skip
        finally:
            bar.close()
        summary.seconds = time.perf_counter() - started
        store.finish_run(run_id, summary.as_dict())
    return summary


def _tasks(store: Store, plan: list[PlannedCell], spec: ExperimentSpec, evaluation: Evaluation,
           summary: RunSummary) -> list[CellTask]:  # fmt: skip
    """Tasks for the cells not done yet; cells done under other evaluation settings are only
    re-evaluated from their cached scores. Counts the cached cells into ``summary``."""
    done = store.completed()
    eval_hash = evaluation.fingerprint()
    tasks = []
    for cell in plan:
        if done.get(cell.key, "") == eval_hash:
            summary.n_cached += 1
            continue
        cached = store.load_scores(cell.key) if cell.key in done else None
        tasks.append(CellTask(cell.key, cell.detector.name, cell.params, cell.seed,
                              cell.entity.name, cell.perturbation, spec.scaling, evaluation,
                              spec.execution.cell_time_limit, cell.entity, cached))  # fmt: skip
    return tasks


def _record(
    store: Store,
    run_id: int,
    cell: PlannedCell,
    scaling: str,
    result: CellResult,
    summary: RunSummary,
) -> None:
    if result.evaluated_only:
        store.write_evaluation(result.key, result.evaluation, result.metrics, result.thresholds)
        summary.n_rescored += 1
        return
    store.write_cell(
        cell.record(scaling, result), run_id, result.scores, result.metrics, result.thresholds
    )
    if result.status == "ok":
        summary.n_computed += 1
        return
    if result.status == "timeout":
        summary.n_timeout += 1
    else:
        summary.n_failed += 1
    summary.failures.append(
        (
            cell.variant,
            cell.dataset,
            cell.entity.name,
            cell.seed,
            cell.perturbation.key(),
            result.status,
            result.error,
        )
    )
