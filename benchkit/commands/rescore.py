"""``benchkit rescore OUT``: recompute every cell's metrics from its cached scores.

Detectors are not run again. Thresholds and metric options come from the spec of the latest run
in OUT; the metric code is the installed one (so new metrics reach old results this way).
"""

from __future__ import annotations

import argparse
import sys

from benchkit.commands.run import _workers
from benchkit.protocol import CellTask, Evaluation
from benchkit.runner import available_cores, run_local
from benchkit.spec import parse_evaluation
from benchkit.store import Store, writer_lock


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "rescore",
        help="recompute metrics of a results folder from its cached scores",
        description="Recompute thresholds and metrics of every finished cell in OUT from the "
        "cached scores, with the latest run's threshold and metric settings.",
    )
    p.add_argument("out", metavar="OUT", help="results folder written by benchkit run")
    p.add_argument("--workers", metavar="N", help="worker processes (default: available cores)")
    p.add_argument("--quiet", action="store_true", help="print nothing but errors")
    p.set_defaults(func=main)


def rescore(out: str, workers: int | None = None) -> tuple[int, int]:
    """Re-evaluate every ``ok`` cell of ``out``; return ``(n_rescored, n_failed)``."""
    with Store(out) as store, writer_lock(out):
        thresholds, metric_options = parse_evaluation(store.latest_run()["spec"])
        evaluation = Evaluation(thresholds, metric_options)
        keys = sorted(store.completed())
        tasks = (
            CellTask(
                key,
                "",
                {},
                0,
                "",
                None,
                "",
                evaluation,
                float("inf"),
                cached_scores=store.load_scores(key),
            )
            for key in keys
        )
        done = failed = 0
        for result in run_local(tasks, workers or available_cores()):
            if result.status == "ok":
                store.write_evaluation(
                    result.key, result.evaluation, result.metrics, result.thresholds
                )
                done += 1
            else:
                failed += 1
                print(f"rescore failed for cell {result.key}: {result.error}", file=sys.stderr)
    return done, failed


def main(args: argparse.Namespace) -> int:
    done, failed = rescore(args.out, _workers(args.workers))
    if not args.quiet:
        print(f"{done} cells re-evaluated from cached scores, {failed} failed: {args.out}")
    return 0 if failed == 0 else 3
