"""``benchkit apply BUNDLE DATA [--to FILE] [--follow]``: score raw KPI rows with a bundle.

DATA is comma-separated text (a header naming the KPIs, or none, as in a split-folder file), a
``.parquet`` table, or ``-`` for standard input. Output: CSV (or JSON lines) on standard output
or in FILE (written under a temporary name and renamed; with ``--follow`` FILE must be new and is
written line by line). See :mod:`benchkit.deploy.apply`.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
from pathlib import Path

from benchkit.deploy.apply import (
    FORMATS,
    ON_BAD_ROW,
    LineWriter,
    apply_batch,
    apply_follow,
    check_streamable,
    read_rows,
)
from benchkit.deploy.bundle import load_bundle
from benchkit.deploy.rows import read_table
from benchkit.deploy.scoring import UPDATES, pin_numerics
from benchkit.errors import DataError, SpecError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "apply",
        help="score KPI rows with an exported bundle (batch or --follow a stream)",
        description="Score raw KPI rows with a bundle written by 'benchkit export-model': "
        "one output line per row with step, score, threshold and alert.",
    )
    p.add_argument("bundle", metavar="BUNDLE", help="bundle folder")
    p.add_argument("data", metavar="DATA", help="CSV text, a .parquet table, or - for stdin")
    p.add_argument("--to", metavar="FILE", help="output file (default: standard output)")
    p.add_argument("--follow", action="store_true",
                   help="read rows as they arrive and write one line per row at once")
    p.add_argument("--format", default="csv", choices=FORMATS, help="output format")
    p.add_argument("--update", choices=UPDATES,
                   help="threshold: fixed (the exported value), spot or dspot (streaming POT, "
                   "Siffer et al. 2017); default: spot with --follow on a POT bundle, else fixed")
    p.add_argument("--depth", type=int, default=0, metavar="D",
                   help="DSPOT moving-average depth (required with --update dspot)")
    p.add_argument("--on-bad-row", default="stop", choices=ON_BAD_ROW,
                   help="a malformed row stops the run (default) or is skipped with a warning")
    p.add_argument("--culprits", type=int, default=3, metavar="K",
                   help="top KPIs listed per alert, where the detector attributes (default 3)")
    p.set_defaults(func=main, numerics_of=bundle_numerics)


def bundle_numerics(args: argparse.Namespace) -> str:
    """The numeric path the bundle's scores were computed on (pinned unless it says fast): the
    command runs on it, so that scores agree with the run's bit for bit."""
    import json
    from pathlib import Path

    from benchkit.deploy.bundle import MANIFEST

    try:
        manifest = json.loads((Path(args.bundle) / MANIFEST).read_text(encoding="utf-8"))
        return str((manifest.get("numerics") or {}).get("mode") or "pinned")
    except (OSError, ValueError, AttributeError):
        return "pinned"  # the command itself reports a bad bundle


def _update(args: argparse.Namespace, strategy: str) -> str:
    update = args.update or ("spot" if args.follow and strategy == "pot" else "fixed")
    if update == "dspot" and args.depth < 1:
        raise SpecError("--update dspot: give the moving-average depth with --depth D (D >= 1)")
    if update != "dspot" and args.depth:
        raise SpecError("--depth: only used with --update dspot")
    return update


@contextlib.contextmanager
def _input(data: str):
    if data == "-":
        yield sys.stdin, "<stdin>"
        return
    path = Path(data)
    try:
        fh = open(path, encoding="utf-8", newline="")
    except FileNotFoundError:
        raise DataError(f"{path}: no such file") from None
    except (IsADirectoryError, PermissionError) as exc:
        raise DataError(f"{path}: cannot read ({exc.strerror})") from None
    with fh:
        yield fh, str(path)


@contextlib.contextmanager
def _output(to: str | None, follow: bool):
    if to is None:
        yield sys.stdout
        return
    target = Path(to)
    if follow and target.exists():
        raise SpecError(f"--to {target}: exists; --follow writes a new file line by line")
    if not target.parent.is_dir():
        raise SpecError(f"--to {target}: the parent folder does not exist")
    if follow:
        with open(target, "x", encoding="utf-8") as fh:
            yield fh
        return
    tmp = target.with_name(f".{target.name}.tmp{os.getpid()}")
    try:
        with open(tmp, "w", encoding="utf-8") as fh:
            yield fh
        os.replace(tmp, target)
    finally:
        tmp.unlink(missing_ok=True)


def _culprits(k: int) -> int:
    if k < 0:
        raise SpecError(f"--culprits: expected an integer >= 0, got {k}")
    return k


def main(args: argparse.Namespace) -> int:
    pin_numerics()
    bundle = load_bundle(args.bundle)
    update = _update(args, bundle.threshold["strategy"])
    top = _culprits(args.culprits)
    attributes = top > 0 and bool(getattr(bundle.detector, "attributes", False))
    if args.follow:
        check_streamable(bundle)
    is_table = args.data != "-" and Path(args.data).suffix == ".parquet"
    if is_table and args.follow:
        raise SpecError("--follow: reads text rows; a .parquet table is applied without it")
    if args.follow:
        with _input(args.data) as (fh, source), _output(args.to, True) as out:
            writer = LineWriter(out, args.format, attributes, flush=True)
            apply_follow(bundle, iter(fh.readline, ""), source, writer, update, args.depth, top,
                         args.on_bad_row)  # fmt: skip
        return 0
    if is_table:
        raw = read_table(Path(args.data), bundle.channels)
    else:
        with _input(args.data) as (fh, source):
            raw = read_rows(bundle, fh, source, args.on_bad_row)
    with _output(args.to, False) as out:
        apply_batch(bundle, raw, LineWriter(out, args.format, attributes), update, args.depth, top)
    return 0
