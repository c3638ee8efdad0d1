"""Runner scaling and store overhead, measured side by side in one run.

1. Cells per second of ``run_experiment`` on a CPU-bound grid (classical detectors on the demo
   scenario) with 1 and with 2 local workers, each into a fresh results folder; median of
   ``--repeats`` runs. Target: 2 workers at least 1.6x faster than 1 on 2 cores.
2. The store's own cost per cell: ``Store.write_cell`` (compressed score file written and renamed,
   then one SQLite transaction with the cell row, its metrics and thresholds) for cells of the
   default demo size; median over ``--cells`` writes. Target: under 5 ms.

Run: ``.venv/bin/python benchmarks/runner_scaling.py``.
"""

from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np

from benchkit.metrics import MetricOptions
from benchkit.runner import available_cores, run_experiment
from benchkit.spec import parse_spec
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


if __name__ == "__main__":
    main()
