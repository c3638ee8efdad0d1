"""Speed of the exact alert curve against the exact best-F1 search, measured side by side.

Run: ``.venv/bin/python benchmarks/alerts_speed.py [--quick]``. Times are medians of repeats taken
in alternation in one run (other work on the machine hits both alike), as wall time and as this
process's CPU time (less sensitive to other processes on a shared machine); the ratio is
alert_curve / best_f1(adjust="point"). Target (issue 14): at n = 1,000,000 with 1,000 events,
alert_curve with the default merge_gap = 0 costs at most 2x best_f1(adjust="point"). A larger gap
is printed for reference (it adds the sliding window maxima and a search of each alert start's
window maximum), without a target; so are other shapes of scores (ties, float32 values, a
warm-up of -inf) and of labels (many short events).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402
from metrics_speed import make_case, median_seconds, verdict  # noqa: E402

from benchkit.metrics import alert_curve, best_f1  # noqa: E402

TARGET = 2.0


def curve_speed(n: int, events: int, repeats: int, judge: bool) -> None:
    scores, labels = make_case(n, events)
    calls = {
        "best_f1 adjust=point": lambda: best_f1(scores, labels, "point"),
        "alert_curve merge_gap=0": lambda: alert_curve(scores, labels, 0),
        "alert_curve merge_gap=12": lambda: alert_curve(scores, labels, 12),
    }
    for clock, timer in (("wall", time.perf_counter), ("CPU", time.process_time)):
        seconds = median_seconds(calls, dict.fromkeys(calls, repeats), timer)
        base = seconds["best_f1 adjust=point"]
        print(f"alert_curve vs best_f1(adjust='point'), n={n:,}, {events:,} events, "
              f"median of {repeats}, {clock} time")
        for name, value in seconds.items():
            ratio = value / base
            note = "" if name != "alert_curve merge_gap=0" else verdict(
                ratio <= TARGET, f"<= {TARGET:.1f}x", judge
            )
            print(f"  {name:28s} {value * 1e3:9.1f} ms  {ratio:6.2f}x{note}")


def other_shapes(n: int, repeats: int) -> None:
    """The same ratio on other shapes of scores and labels, for reference (no target)."""
    rng = np.random.default_rng(2)
    scores, labels = make_case(n, n // 1000)
    many = np.zeros(n, dtype=np.int8)
    for start in rng.choice(n - 50, n // 100, replace=False):
        many[start : start + 20] = 1
    shapes = {
        "scores rounded to 0.001 (ties)": (np.round(scores, 3), labels),
        "float32 scores": (scores.astype(np.float32).astype(np.float64), labels),
        "warm-up of 5,000 -inf steps": (np.where(np.arange(n) < 5000, -np.inf, scores), labels),
        f"{n // 100:,} events of 20 steps": (rng.normal(size=n) + 1.5 * many, many),
    }
    print(f"alert_curve(merge_gap=0) / best_f1(adjust='point') on other shapes, n={n:,}, "
          f"median of {repeats}, CPU time, for reference")
    for name, (s, y) in shapes.items():
        calls = {"best": lambda s=s, y=y: best_f1(s, y, "point"),
                 "curve": lambda s=s, y=y: alert_curve(s, y, 0)}
        seconds = median_seconds(calls, dict.fromkeys(calls, repeats), time.process_time)
        print(f"  {name:34s} {seconds['curve'] * 1e3:7.1f} ms / {seconds['best'] * 1e3:6.1f} ms"
              f"  {seconds['curve'] / seconds['best']:5.2f}x")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller size, fewer repeats")
    args = parser.parse_args()
    if args.quick:
        curve_speed(100_000, 100, 3, judge=False)
        return
    curve_speed(1_000_000, 1_000, 15, judge=True)
    other_shapes(1_000_000, 9)


if __name__ == "__main__":
    main()
