"""``benchkit export OUT --format csv|parquet [--to PATH]``: the store as plain tables.

Writes ``metrics.<ext>`` (long form: one row per cell, threshold strategy and metric),
``cells.<ext>`` (one row per cell with status, error and timings) and ``training.<ext>`` (one
row per epoch of every cell that trained epoch by epoch: losses, stop epoch and reason, flags;
empty when none did) of the latest run into
``PATH`` (default ``OUT/export``). Each file is written under a temporary name and renamed.
"""

from __future__ import annotations

import argparse
import os
from pathlib import Path

import pandas as pd

from benchkit.errors import SpecError
from benchkit.report.training import training_epochs
from benchkit.store import Store

FORMATS = ("csv", "parquet")


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "export",
        help="export metrics and cells of a results folder to CSV or Parquet",
        description="Write metrics.<ext>, cells.<ext> and training.<ext> of the latest run in OUT.",
    )
    p.add_argument("out", metavar="OUT", help="results folder written by benchkit run")
    p.add_argument("--format", required=True, choices=FORMATS, help="file format")
    p.add_argument("--to", metavar="PATH", help="destination folder (default: OUT/export)")
    p.add_argument("--quiet", action="store_true", help="do not print the paths written")
    p.set_defaults(func=main)


def _write(frame: pd.DataFrame, path: Path, fmt: str) -> None:
    tmp = path.with_name(f".{path.name}.tmp{os.getpid()}")
    try:
        if fmt == "csv":
            frame.to_csv(tmp, index=False)
        else:
            frame.to_parquet(tmp, index=False)
        os.replace(tmp, path)
    finally:
        tmp.unlink(missing_ok=True)


def export(out: str | Path, fmt: str, to: str | Path | None = None) -> list[Path]:
    """Write the latest run's metrics, cells and training tables; return the paths written."""
    if fmt not in FORMATS:
        raise SpecError(f"--format: expected one of {', '.join(FORMATS)}, got {fmt!r}")
    with Store(out) as store:
        frames = {"metrics": store.metrics_frame(), "cells": store.cells_frame(),
                  "training": training_epochs(store.training_frame())}
    dest = Path(to) if to is not None else Path(out) / "export"
    if dest.exists() and not dest.is_dir():
        raise SpecError(f"--to {dest}: exists and is not a folder")
    dest.mkdir(parents=True, exist_ok=True)
    written = []
    for name, frame in frames.items():
        path = dest / f"{name}.{fmt}"
        _write(frame, path, fmt)
        written.append(path)
    return written


def main(args: argparse.Namespace) -> int:
    for path in export(args.out, args.format, args.to):
        if not args.quiet:
            print(path)
    return 0
