"""Runner scaling, executor parity and store overhead, measured side by side in one run.

1. Cells per second of ``run_experiment`` on a CPU-bound grid (classical detectors on the demo
   scenario) with 1 and with 2 local workers, each into a fresh results folder; median of
   ``--repeats`` runs. Target: 2 workers at least 1.6x faster than 1 on 2 cores.
2. Executor parity: the same cells (the default spec's detectors, classical and torch, on
   ``--entities`` application-server entities of the public data, one seed) on the local pool,
   on a Dask LocalCluster (``executor = "dask"``, no scheduler; its start-up is part of the run)
   and on a scheduler with two worker commands on 127.0.0.1 (started before the clock starts, as
   a standing cluster would be): ``benchkit worker`` twice, then plain ``dask worker`` twice
   (set up by benchkit's worker plug-in). Each on ``--workers`` worker processes. Prints cells/s,
   wall time relative to the local pool (target: within 1.15x), and the CPU seconds the worker
   processes spent per cell (user and system), which other load on the machine moves less than
   wall time. The metrics of every executor must equal the local pool's.
3. The store's own cost per cell: ``Store.write_cell`` (compressed score file written and renamed,
   then one SQLite transaction with the cell row, its metrics and thresholds) for cells of the
   default demo size; median over ``--cells`` writes. Target: under 5 ms.

Run: ``.venv/bin/python benchmarks/runner_scaling.py`` (``--skip-executors`` for parts 1 and 3
only; the public data folder is ``../shared/data/public`` or ``$BENCHKIT_PUBLIC_DATA``).
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd
import psutil

from benchkit.loopback import LoopbackCluster
from benchkit.metrics import MetricOptions
from benchkit.runner import available_cores, run_experiment
from benchkit.spec import default_spec, parse_spec
from benchkit.store import CellRecord, Store

GRID = {
    "name": "runner-scaling",
    "seeds": [0, 1, 2],
    "datasets": [{"source": "demo"}],
    "detectors": [
        {"name": "isolation-forest", "label": "iforest-100", "params": {"n_estimators": 100}},
        {"name": "isolation-forest", "label": "iforest-200", "params": {"n_estimators": 200}},
        {"name": "pyod:KNN"},
    ],
}


def cells_per_second(workers: int, repeats: int) -> tuple[float, int]:
    spec = parse_spec(GRID)
    rates, n = [], 0
    for _ in range(repeats):
        with tempfile.TemporaryDirectory() as tmp:
            start = time.perf_counter()
            summary = run_experiment(spec, Path(tmp) / "out", workers=workers, quiet=True)
            elapsed = time.perf_counter() - start
        if summary.n_failed or summary.n_timeout:
            raise SystemExit(f"benchmark grid had failed cells: {summary.failures[:3]}")
        n = summary.n_computed
        rates.append(n / elapsed)
    return statistics.median(rates), n


def public_data() -> Path:
    root = os.environ.get("BENCHKIT_PUBLIC_DATA")
    return Path(root) if root else Path(__file__).resolve().parents[1] / "../shared/data/public"


def parity_spec(n_entities: int) -> dict:
    entities = [f"omi-{i}" for i in range(1, n_entities + 1)]
    source = str((public_data() / "app-servers").resolve())
    return {
        "name": "executor-parity",
        "seeds": [0],
        "datasets": [{"source": source, "entities": entities}],
        "detectors": default_spec().to_dict()["detectors"],
    }


def _metrics(out: Path) -> pd.DataFrame:
    with Store(out) as store:
        return store.metrics_frame().drop(columns="cell_key")


def _children_cpu() -> tuple[float, float]:
    r = resource.getrusage(resource.RUSAGE_CHILDREN)
    return r.ru_utime, r.ru_stime


def _processes_cpu(pids: list[int]) -> tuple[float, float]:
    times = [psutil.Process(pid).cpu_times() for pid in pids]
    return sum(t.user for t in times), sum(t.system for t in times)


def executor_parity(n_entities: int, workers: int, tmp: Path) -> list[tuple]:
    """Rows ``(executor, cells, seconds, user_s, sys_s)``; checks metrics against the local pool."""
    spec = parse_spec(parity_spec(n_entities))
    rows = []

    def timed(name: str, out: Path, cpu, **kw) -> None:
        before = cpu()
        start = time.perf_counter()
        summary = run_experiment(spec, out, workers=workers, quiet=True, **kw)
        elapsed = time.perf_counter() - start
        after = cpu()
        if summary.n_failed or summary.n_timeout:
            raise SystemExit(f"{name}: failed cells: {summary.failures[:3]}")
        if name != "local pool":
            pd.testing.assert_frame_equal(_metrics(out), _metrics(tmp / "local"))
        rows.append((name, summary.n_computed, elapsed, after[0] - before[0],
                     after[1] - before[1]))  # fmt: skip

    timed("local pool", tmp / "local", _children_cpu)
    timed("Dask LocalCluster", tmp / "localcluster", _children_cpu, executor="dask")
    for kind, label in (("benchkit", "benchkit worker"), ("dask", "plain dask worker")):
        with LoopbackCluster([kind] * workers) as cluster:
            pids = list(cluster.worker_pids().values())
            timed(f"scheduler + {workers} x {label}", tmp / kind,
                  lambda pids=pids: _processes_cpu(pids), executor="dask",
                  scheduler=cluster.address)  # fmt: skip
    return rows


def store_overhead_ms(n_cells: int) -> float:
    rng = np.random.default_rng(0)
    names = MetricOptions().metric_names()
    metrics = {(t, m): float(v) for t in ("oracle", "pot", "quantile") for m, v in
               zip(names, rng.random(len(names)), strict=True)}  # fmt: skip
    metrics.update({("none", m): 0.5 for m in ("roc_auc", "pr_auc", "random_pa_f1")})
    thresholds = {
        f"threshold_{n}": float(v) for n, v in zip("abcdefghijkl", rng.random(12), strict=True)
    }
    labels = (rng.random(2500) < 0.05).astype(np.int8)
    measures = {"fit_seconds": 1.0, "score_seconds": 0.1, "points_per_second": 25000.0,
                "peak_memory_mb": 10.0, "n_train": 3000, "n_test": 2500, "warmup": 31}  # fmt: skip
    times = []
    with tempfile.TemporaryDirectory() as tmp, Store(Path(tmp) / "out", create=True) as store:
        run_id = store.begin_run("bench", "", {}, {}, {}, [])
        for i in range(n_cells):
            record = CellRecord(
                cell_key=f"{i:064x}", detector="d", params="{}", dataset="demo", entity="e",
                entity_fingerprint="0" * 64, seed=0, perturbation="none", noise_kind="none",
                noise_level=0.0, noise_apply="both", scaling="zscore", protocol_version=1,
                status="ok", measures=measures, evaluation="x",
            )  # fmt: skip
            scores = {"test_scores": rng.random(2500), "train_scores": rng.random(3000),
                      "labels": labels, "warmup": np.array(31)}  # fmt: skip
            start = time.perf_counter()
            store.write_cell(record, run_id, scores, metrics, thresholds)
            times.append(time.perf_counter() - start)
    return 1000.0 * statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeats", type=int, default=3)
    parser.add_argument("--cells", type=int, default=300)
    parser.add_argument("--entities", type=int, default=8, help="application-server entities")
    parser.add_argument("--workers", type=int, default=2, help="worker processes per executor")
    parser.add_argument("--skip-executors", action="store_true")
    args = parser.parse_args()
    one, n = cells_per_second(1, args.repeats)
    two, _ = cells_per_second(2, args.repeats)
    store_ms = store_overhead_ms(args.cells)
    print(f"runner scaling: {n} cells (3 demo entities x 3 detector variants x 3 seeds), "
          f"{available_cores()} cores available, median of {args.repeats} runs")  # fmt: skip
    print(f"{'workers':>8}  {'cells/s':>8}  {'speed-up':>8}  target")
    print(f"{1:>8}  {one:>8.2f}  {1.0:>8.2f}")
    verdict = "met" if two / one >= 1.6 else "NOT met"
    print(f"{2:>8}  {two:>8.2f}  {two / one:>8.2f}  >= 1.60 ({verdict})")
    print(f"store overhead per cell: {store_ms:.2f} ms (median of {args.cells} writes; "
          f"target < 5 ms: {'met' if store_ms < 5 else 'NOT met'})")  # fmt: skip
    if args.skip_executors:
        return
    with tempfile.TemporaryDirectory() as tmp:
        rows = executor_parity(args.entities, args.workers, Path(tmp))
    n = rows[0][1]
    print(f"\nexecutor parity: {n} cells (default spec's {n // args.entities} detector variants x "
          f"{args.entities} application-server entities x 1 seed), {args.workers} worker "
          f"processes each, metrics identical to the local pool's in every executor")  # fmt: skip
    print(f"{'executor':<32}  {'cells/s':>7}  {'wall s':>7}  {'x local':>7}  "
          f"{'CPU s/cell (user + sys)':>24}  target")  # fmt: skip
    base = rows[0][2]
    for name, cells, seconds, user, system in rows:
        ratio = seconds / base
        verdict = "" if name == "local pool" else (
            f"<= 1.15 ({'met' if ratio <= 1.15 else 'NOT met'})")  # fmt: skip
        cpu = f"{user / cells:.3f} + {system / cells:.3f}"
        print(f"{name:<32}  {cells / seconds:>7.2f}  {seconds:>7.1f}  {ratio:>7.2f}  "
              f"{cpu:>24}  {verdict}")  # fmt: skip


if __name__ == "__main__":
    main()
