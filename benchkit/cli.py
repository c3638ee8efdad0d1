"""The ``benchkit`` command: one subcommand module per area under :mod:`benchkit.commands`.

Each command module exposes ``add_parser(subparsers)``, which registers its parser and sets
``func`` (``args -> int``). Input errors become one line on stderr and exit status 2.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import warnings

from benchkit import __version__
from benchkit.data.validate import DataWarning
from benchkit.errors import BenchkitInputError

COMMAND_MODULES = (
    "benchkit.commands.run",
    "benchkit.commands.datasets",
    "benchkit.commands.detectors",
    "benchkit.commands.report",
    "benchkit.commands.verify",
    "benchkit.commands.rescore",
    "benchkit.commands.export",
    "benchkit.commands.export_model",
    "benchkit.commands.apply",
    "benchkit.commands.worker",
)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="benchkit",
        description=(
            "Compare anomaly detectors on labelled multivariate KPI data under one protocol."
        ),
    )
    parser.add_argument("--version", action="version", version=f"benchkit {__version__}")
    subparsers = parser.add_subparsers(dest="command", metavar="COMMAND")
    for module in COMMAND_MODULES:
        try:
            mod = importlib.import_module(module)
        except ModuleNotFoundError as exc:
            if exc.name == module:
                continue
            raise
        mod.add_parser(subparsers)
    return parser


def main(argv: list[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if not getattr(args, "func", None):
        parser.print_help()
        return 2
    try:
        mode_of = getattr(args, "numerics_of", None)
        if mode_of is not None and argv is None:  # a real `benchkit` process, not a caller's
            from benchkit import numerics

            numerics.restart_on_path(mode_of(args), ["-m", "benchkit.cli", *sys.argv[1:]])
        with warnings.catch_warnings():
            warnings.showwarning = _data_warnings_as_lines(warnings.showwarning)
            return int(args.func(args) or 0)
    except BenchkitInputError as exc:
        print(f"benchkit: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("benchkit: interrupted", file=sys.stderr)
        return 130


def _data_warnings_as_lines(show):
    """A ``warnings.showwarning`` that prints a DataWarning as one ``benchkit: warning:`` line
    (as ``datasets show`` does) and passes every other warning to ``show``."""

    def shown(message, category, filename, lineno, file=None, line=None):
        if issubclass(category, DataWarning):
            print(f"benchkit: warning: {message}", file=sys.stderr)
        else:
            show(message, category, filename, lineno, file, line)

    return shown


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
