"""Run an experiment: expand the grid, skip cached cells, execute the rest, write the store.

Cells run in worker processes: a local pool (default; one worker per available core,
:mod:`benchkit.local_pool`) or Dask distributed (:mod:`benchkit.dask_executor`); inside a worker,
:mod:`benchkit.worker` runs each cell with its time and thread limits. Only this driver writes the
store. A cell that raises, returns bad scores or runs past its time limit is recorded as
``failed`` or ``timeout`` with its message; the other cells go on. Running the same spec into the
same OUT again computes only what is missing (``ok`` cells are reused; failed and timed-out cells
are tried again), and cells whose metric or threshold settings changed get their metrics
recomputed from the cached scores.
"""

from __future__ import annotations

import contextlib
import os
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from benchkit import numerics
from benchkit.dask_executor import DaskSession
from benchkit.data.model import Dataset, Entity
from benchkit.errors import DataError, SpecError
from benchkit.local_pool import hard_kill_grace, run_local
from benchkit.protocol import (
    PROTOCOL_VERSION,
    CellResult,
    CellTask,
    Evaluation,
    canonical_json,
    cell_key,
)
from benchkit.spec import DetectorSpec, ExperimentSpec
from benchkit.store import CellRecord, Store, writer_lock

__all__ = [
    "PlannedCell",
    "RunSummary",
    "available_cores",
    "environment",
    "expand_grid",
    "hard_kill_grace",
    "load_datasets",
    "run_experiment",
    "run_local",
]


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
        _check_step_for_budget(spec, dataset, i)
        out.append(dataset)
    return out


def _check_step_for_budget(spec: ExperimentSpec, dataset: Dataset, index: int) -> None:
    """An alert budget per day needs every entity's step length; say which one lacks it."""
    cfg = spec.thresholds
    if "alert-budget" not in cfg.strategies or cfg.alert_budget_per != "day":
        return
    for entity in dataset.entities:
        if entity.step_seconds is None:
            raise SpecError(
                f"thresholds.alert_budget: a budget per day needs the step length, but "
                f"datasets[{index}] entity {entity.name!r} has none; give the data a step "
                'or set thresholds.alert_budget_per = "1000-steps"'
            )


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
                            det.name, params, fingerprint, entity.name, seed, p.key(), spec.scaling,
                            spec.constant_channels,
                            spec.execution.numerics,
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


def environment(mode: str = numerics.DEFAULT_MODE) -> dict[str, Any]:
    """Package versions, Python, platform, cores, the numeric environment of ``mode``
    (:func:`benchkit.numerics.describe`) and the git revision of the checkout if any."""
    import platform
    import subprocess
    from importlib.metadata import PackageNotFoundError, version

    from benchkit import DISTRIBUTION

    packages = {}
    for name in (
        DISTRIBUTION,
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
        "numerics": numerics.describe(mode),
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
            stack.enter_context(DaskSession(workers, scheduler, spec.execution.numerics))
            if executor == "dask"
            else None
        )
        stack.enter_context(writer_lock(out))
        store = stack.enter_context(Store(out, create=True))
        store.remove_partial_files()
        grid = [(c.key, c.variant) for c in plan]
        env = environment(spec.execution.numerics)
        run_id = store.begin_run(spec.name, spec.to_toml(), spec.to_dict(), env, fingerprints,
                                 grid)  # fmt: skip
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
                              spec.execution.cell_time_limit, cell.entity, cached,
                              constant_channels=spec.constant_channels,
                              numerics=spec.execution.numerics))  # fmt: skip
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
        cell.record(scaling, result), run_id, result.scores, result.metrics, result.thresholds,
        result.training,
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
