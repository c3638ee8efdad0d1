"""``benchkit run [SPEC]``: run an experiment (the built-in default when no SPEC is given)."""

from __future__ import annotations

import argparse
import sys
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
from tabulate import tabulate

from benchkit.detector import shown
from benchkit.errors import SpecError
from benchkit.runner import RunSummary, run_experiment
from benchkit.spec import ExperimentSpec, default_spec, default_spec_text, load_spec
from benchkit.store import DB_NAME, LOCK_NAME, Store

RUNS_DIR = Path("results") / "runs"
EXIT_SOME_FAILED = 3

# (threshold, metric, column title) of the summary table
SUMMARY_COLUMNS = (
    ("oracle", "f1", "oracle F1"),
    ("oracle", "pa_f1", "oracle PA-F1"),
    ("pot", "f1", "POT F1"),
    ("pot", "pa_f1", "POT PA-F1"),
    ("quantile", "f1", "quantile F1"),
    ("none", "roc_auc", "ROC-AUC"),
)
MAX_LISTED_FAILURES = 10


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "run",
        help="run an experiment spec (default: every built-in detector on the demo data)",
        description="Evaluate every detector variant on every dataset entity, seed and "
        "perturbation of SPEC under one protocol. An existing OUT is resumed: finished cells "
        "are not recomputed.",
    )
    p.add_argument("spec", nargs="?", metavar="SPEC", help="experiment spec (TOML)")
    p.add_argument(
        "--out", metavar="OUT", help=f"results folder (default: a new folder under {RUNS_DIR}/)"
    )
    p.add_argument(
        "--executor", choices=("local", "dask"), help="where cells run (default: the spec's)"
    )
    p.add_argument(
        "--scheduler",
        metavar="ADDR",
        help="Dask scheduler, e.g. tcp://host:8786 (default: a local cluster on loopback)",
    )
    p.add_argument("--workers", metavar="N", help="worker processes (default: available cores)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--print-default", action="store_true", help="print the default spec and exit")
    p.add_argument(
        "--data-root",
        metavar="DIR",
        help="root folder for dataset files that need one (else $BENCHKIT_DATA_ROOT)",
    )
    p.set_defaults(func=main)


def _workers(text: str | None) -> int | None:
    if text is None:
        return None
    try:
        n = int(text)
    except ValueError:
        n = 0
    if n < 1:
        raise SpecError(f"--workers: expected an integer >= 1, got {shown(text)}")
    return n


def _out_folder(out: str | None, spec: ExperimentSpec) -> Path:
    if out is None:
        stamp = datetime.now().strftime("%Y%m%d-%H%M%S")
        safe = "".join(c if c.isalnum() or c in "-_." else "-" for c in spec.name)
        return RUNS_DIR / f"{safe}-{stamp}"
    path = Path(out)
    if path.exists() and not path.is_dir():
        raise SpecError(f"--out {out}: exists and is not a folder")
    foreign = [p for p in path.iterdir() if p.name != LOCK_NAME] if path.is_dir() else []
    if foreign and not (path / DB_NAME).is_file():
        raise SpecError(f"--out {out}: a non-empty folder that holds no benchkit results")
    return path


def main(args: argparse.Namespace) -> int:
    if args.print_default:
        sys.stdout.write(default_spec_text())
        return 0
    workers = _workers(args.workers)
    spec = load_spec(args.spec) if args.spec else default_spec()
    out, summary = execute(
        spec,
        args.out,
        executor=args.executor,
        workers=workers,
        scheduler=args.scheduler,
        quiet=args.quiet,
        data_root=args.data_root,
    )
    print_summary(out, summary)
    written = write_outputs(out)
    print(f"report: {written['html']}")
    print(f"results: {out}")
    return 0 if summary.ok else EXIT_SOME_FAILED


def execute(
    spec: ExperimentSpec,
    out: str | Path | None,
    *,
    executor: str | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    quiet: bool = False,
    data_root: str | Path | None = None,
) -> tuple[Path, RunSummary]:
    """Check the results folder and run ``spec`` into it (what ``benchkit run`` does before
    its report); ``out=None`` makes a new folder under ``results/runs/``.

    Returns the results folder and the run's summary. Bad input raises SpecError or DataError
    before anything is written.
    """
    folder = _out_folder(None if out is None else str(out), spec)
    summary = run_experiment(
        spec,
        folder,
        executor=executor,
        workers=workers,
        scheduler=scheduler,
        quiet=quiet,
        data_root=data_root,
    )
    return folder, summary


def print_summary(out: Path, summary: RunSummary) -> None:
    """Print the decision summary, the summary table and the cell counts to stdout, failures
    to stderr."""
    with Store(out) as store:
        decision = decision_text(store, summary.run_id)
        if decision:
            print(decision)
        print(summary_table(store, summary.run_id))
    print(_counts_line(summary))
    for line in _failure_lines(summary):
        print(line, file=sys.stderr)


def write_outputs(out: Path) -> dict[str, Path]:
    """Write the report of OUT (tables, plots, ``report.html``, ``scorecard.json``) with the
    default settings; return ``name -> path`` of every file written."""
    from benchkit.report import write_all

    return write_all(out)


def decision_text(store: Store, run_id: int) -> str:
    """The decision summary tables of the run (markdown), or "" when it has no realistic
    strategy or no successful cell."""
    from benchkit.report.decision import decision_tables
    from benchkit.report.render import render_tables

    metrics = store.metrics_frame(run_id)
    if metrics.empty:
        return ""
    return render_tables(decision_tables(metrics, store.cells_frame(run_id)), "md")


def summary_table(store: Store, run_id: int) -> str:
    """Detectors x key metrics (mean over entities and seeds, clean cells) as one text table."""
    cells = store.cells_frame(run_id)
    metrics = store.metrics_frame(run_id)
    if cells.empty:
        return "(no cells)"
    counts = cells.groupby("variant", sort=False)["status"].agg(
        cells="size", failed=lambda s: int((s != "ok").sum())
    )
    clean = metrics[metrics["perturbation"] == "none"]
    means = clean.groupby(["variant", "threshold", "metric"])["value"].mean()
    fit = cells[cells["perturbation"] == "none"].groupby("variant")["fit_seconds"].mean()
    rows = []
    for variant in counts.index:
        row = [variant, int(counts.loc[variant, "cells"]), int(counts.loc[variant, "failed"])]
        for threshold, metric, _ in SUMMARY_COLUMNS:
            row.append(means.get((variant, threshold, metric), np.nan))
        row.append(fit.get(variant, np.nan))
        rows.append(row)
    headers = ["detector", "cells", "failed", *(t for _, _, t in SUMMARY_COLUMNS), "fit s"]
    frame = pd.DataFrame(rows, columns=headers)
    return tabulate(frame, headers="keys", showindex=False, floatfmt=".3f", missingval="-")


def _counts_line(s: RunSummary) -> str:
    return (
        f"{s.n_cells} cells: {s.n_computed} computed, {s.n_cached} cached, "
        f"{s.n_rescored} re-evaluated from cached scores, {s.n_failed} failed, "
        f"{s.n_timeout} timed out ({s.seconds:.1f} s)"
    )


def _failure_lines(s: RunSummary) -> list[str]:
    lines = []
    for variant, dataset, entity, seed, pert, status, error in s.failures[:MAX_LISTED_FAILURES]:
        lines.append(f"{status}: {variant} on {dataset}/{entity} seed {seed} noise {pert}: {error}")
    if len(s.failures) > MAX_LISTED_FAILURES:
        lines.append(
            f"... and {len(s.failures) - MAX_LISTED_FAILURES} more (see cells in the store)"
        )
    return lines
