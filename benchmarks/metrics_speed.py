"""Speed and memory of benchkit.metrics against reference implementations, measured side by side.

Run: ``.venv/bin/python benchmarks/metrics_speed.py [--quick]``. Every time is the median of
several repeats, taken in alternation in one run; the ratio is ours / reference (below 1: faster).
Targets (issue 3): at n = 1,000,000 with 1,000 events, best_f1(adjust="point") <= 1.0x
scikit-learn's precision_recall_curve and "pa%k"/"delay" <= 1.5x; at n = 200,000 with about
10,000 predicted ranges, range_precision_recall >= 150x faster than prts for every bias; peak
memory O(n) (bytes per point stay flat as n grows).
"""

from __future__ import annotations

import argparse
import statistics
import time
import tracemalloc
from collections.abc import Callable

import numpy as np
from sklearn.metrics import precision_recall_curve

from benchkit.metrics import (
    best_f1,
    best_range_f1,
    oracle_metric_set,
    random_pa_f1,
    range_precision_recall,
)


def make_case(n: int, events: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    """Invented labels (events of 5..195 points) and scores that are higher inside events."""
    rng = np.random.default_rng(seed)
    labels = np.zeros(n, dtype=np.int8)
    slot = n // events
    starts = np.arange(events) * slot + rng.integers(0, max(slot - 200, 1), events)
    sizes = rng.integers(5, 196, events)
    for start, size in zip(starts, sizes, strict=True):
        labels[start : start + size] = 1
    scores = rng.normal(size=n) + 1.5 * labels
    return scores, labels


def runs_prediction(n: int, ranges: int, seed: int = 1) -> np.ndarray:
    """A 0/1 prediction with about ``ranges`` runs of ones."""
    rng = np.random.default_rng(seed)
    pred = np.zeros(n, dtype=np.int8)
    starts = np.sort(rng.choice(n // 10, ranges, replace=False)) * 10
    pred[(starts[:, None] + np.arange(rng.integers(1, 9))).ravel().clip(0, n - 1)] = 1
    return pred


def median_seconds(
    calls: dict[str, Callable], repeats: dict[str, int], timer: Callable = time.perf_counter
) -> dict[str, float]:
    """Median time of each call by ``timer`` (default: wall time), repeats taken round-robin so
    load hits all alike."""
    times: dict[str, list[float]] = {name: [] for name in calls}
    for round_ in range(max(repeats.values())):
        for name, call in calls.items():
            if round_ < repeats[name]:
                start = timer()
                call()
                times[name].append(timer() - start)
    return {name: statistics.median(values) for name, values in times.items()}


def peak_bytes(function: Callable, *args, **kwargs) -> int:
    """Peak traced allocation of one call (tracemalloc sees numpy's buffers)."""
    tracemalloc.start()
    try:
        function(*args, **kwargs)
        return tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()


def verdict(ok: bool, target: str, judge: bool) -> str:
    """The target and whether it was met, printed only at the sizes the targets are for."""
    return f"  target {target}: " + ("met" if ok else "MISSED") if judge else ""


def best_f1_speed(n: int, events: int, repeats: int, judge: bool) -> None:
    scores, labels = make_case(n, events)
    calls = {
        "sklearn precision_recall_curve": lambda: precision_recall_curve(labels, scores),
        "best_f1 point-wise": lambda: best_f1(scores, labels),
        "best_f1 adjust=point": lambda: best_f1(scores, labels, "point"),
        "best_f1 adjust=pa%k k=20": lambda: best_f1(scores, labels, "pa%k", k=20),
        "best_f1 adjust=delay d=7": lambda: best_f1(scores, labels, "delay", delay=7),
    }
    seconds = median_seconds(calls, dict.fromkeys(calls, repeats))
    base = seconds["sklearn precision_recall_curve"]
    targets = {"best_f1 adjust=point": 1.0, "best_f1 adjust=pa%k k=20": 1.5,
               "best_f1 adjust=delay d=7": 1.5}
    print(f"\nbest_f1 vs scikit-learn, n={n:,}, {events:,} events, median of {repeats}")
    for name, value in seconds.items():
        ratio = value / base
        target = targets.get(name)
        note = "" if target is None else verdict(ratio <= target, f"<= {target:.1f}x", judge)
        print(f"  {name:32s} {value * 1e3:9.1f} ms  {ratio:6.2f}x{note}")


def range_speed(n: int, ranges: int, repeats: int, reference_repeats: int, judge: bool) -> None:
    try:
        import prts
    except ImportError:
        print("\nrange_precision_recall vs prts: skipped (prts absent: pip install --no-deps prts)")
        return
    _, labels = make_case(n, max(n // 1000, 1))
    pred = runs_prediction(n, ranges)
    found = int(np.count_nonzero(np.diff(np.concatenate(([0], pred))) == 1))
    print(f"\nrange_precision_recall vs prts, n={n:,}, {found:,} predicted ranges, "
          f"{int(np.count_nonzero(np.diff(np.concatenate(([0], labels))) == 1))} real ranges; "
          f"median of {repeats} (ours) and {reference_repeats} (prts)")
    for bias in ("flat", "front", "back", "middle"):
        calls = {
            "ours": lambda b=bias: range_precision_recall(pred, labels, 0.0, "one", b),
            "prts": lambda b=bias: (prts.ts_precision(labels, pred, 0.0, "one", b),
                                    prts.ts_recall(labels, pred, 0.0, "one", b)),
        }
        seconds = median_seconds(calls, {"ours": repeats, "prts": reference_repeats})
        speedup = seconds["prts"] / seconds["ours"]
        print(f"  bias={bias:6s} ours {seconds['ours'] * 1e3:8.2f} ms  prts "
              f"{seconds['prts']:7.2f} s  speed-up {speedup:8.0f}x"
              + verdict(speedup >= 150, ">= 150x", judge))


def memory_scaling(sizes: list[int]) -> None:
    print("\npeak memory (tracemalloc), bytes per point; flat = O(n)")
    for n in sizes:
        scores, labels = make_case(n, max(n // 1000, 1))
        pred = scores > 1.0
        row = {
            "best_f1 point": peak_bytes(best_f1, scores, labels, "point"),
            "best_f1 pa%k": peak_bytes(best_f1, scores, labels, "pa%k", k=20),
            "range_p/r": peak_bytes(range_precision_recall, pred, labels),
            "best_range_f1": peak_bytes(best_range_f1, scores, labels),
        }
        cells = "  ".join(f"{name} {value / 2**20:7.1f} MiB ({value / n:5.1f} B/pt)"
                          for name, value in row.items())
        print(f"  n={n:>9,}  {cells}")


def per_cell_calls(n: int, repeats: int) -> None:
    scores, labels = make_case(n, max(n // 1000, 1))
    calls = {
        "oracle_metric_set": lambda: oracle_metric_set(scores, labels),
        "best_range_f1 (512 quantiles)": lambda: best_range_f1(scores, labels),
        "random_pa_f1 (200 draws)": lambda: random_pa_f1(labels),
    }
    seconds = median_seconds(calls, dict.fromkeys(calls, repeats))
    print(f"\nonce-per-cell calls, n={n:,}, {n // 1000} events, median of {repeats} (no target)")
    for name, value in seconds.items():
        print(f"  {name:32s} {value * 1e3:9.1f} ms")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller sizes, fewer repeats")
    args = parser.parse_args()
    if args.quick:
        best_f1_speed(100_000, 100, 3, judge=False)
        range_speed(20_000, 1_000, 3, 1, judge=False)
        memory_scaling([25_000, 50_000])
        per_cell_calls(10_000, 3)
        return
    best_f1_speed(1_000_000, 1_000, 7, judge=True)
    range_speed(200_000, 10_000, 7, 3, judge=True)
    memory_scaling([250_000, 500_000, 1_000_000])
    per_cell_calls(100_000, 5)


if __name__ == "__main__":
    main()
