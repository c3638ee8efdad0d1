"""``benchkit datasets``: ``show SOURCE`` prints a summary table; ``export-demo DIR`` writes the
demo dataset in the split-folder layout."""

from __future__ import annotations

import argparse
import sys
import warnings

from benchkit.commands._args import parse_key_value
from benchkit.data import DataWarning, export_split_folder, load
from benchkit.data.loaders import DEMO
from benchkit.data.summary import summary_table
from benchkit.errors import DataError

SOURCE_HELP = (
    "'demo', a split-folder root, a .csv/.parquet table, an .npz archive or a dataset .toml"
)


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    """Register ``benchkit datasets`` and its actions."""
    parser = subparsers.add_parser(
        "datasets",
        help="summarise a dataset, or write the demo data as files",
        description="Summarise a dataset, or write the demo data as files.",
    )
    actions = parser.add_subparsers(dest="datasets_action", metavar="ACTION")
    show = actions.add_parser("show", help="print a summary table of a dataset")
    show.add_argument("source", metavar="SOURCE", help=SOURCE_HELP)
    show.add_argument("--data-root", metavar="DIR", help="fills {data_root} in a dataset .toml")
    _add_common(show)
    show.set_defaults(func=run_show)
    export = actions.add_parser(
        "export-demo", help="write the demo dataset in the split-folder layout"
    )
    export.add_argument("directory", metavar="DIR", help="new (or empty) folder to write")
    _add_common(export)
    export.set_defaults(func=run_export_demo)
    parser.set_defaults(func=lambda args: _missing_action(parser))


def _add_common(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "-o",
        "--option",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="loader or demo option, value in TOML syntax (e.g. -o missing=ffill -o n_entities=5)",
    )
    parser.add_argument("-q", "--quiet", action="store_true", help="no warnings or notes")


def _missing_action(parser: argparse.ArgumentParser) -> int:
    parser.print_help(sys.stderr)
    return 2


def parse_options(pairs: list[str]) -> dict:
    """``["n_entities=5", "missing=ffill"]`` -> ``{"n_entities": 5, "missing": "ffill"}``.

    Values are read as TOML values (numbers, booleans, arrays, inline tables); anything
    that is not valid TOML is taken as a plain string.
    """
    return dict(parse_key_value(pair, "--option", DataError) for pair in pairs)


def run_show(args: argparse.Namespace) -> int:
    """Load ``args.source`` and print its summary table."""
    options = parse_options(args.option)
    if args.data_root is not None:
        options["data_root"] = args.data_root
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataWarning)
        dataset = load(args.source, **options)
    _report_warnings(caught, args.quiet)
    print(summary_table(dataset))
    return 0


def run_export_demo(args: argparse.Namespace) -> int:
    """Generate the demo dataset and write it to ``args.directory``."""
    dataset = load(DEMO, **parse_options(args.option))
    target = export_split_folder(dataset, args.directory)
    if not args.quiet:
        print(
            f"wrote {dataset.name} ({len(dataset.entities)} entities) to {target}", file=sys.stderr
        )
    return 0


def _report_warnings(caught: list, quiet: bool) -> None:
    for w in caught:
        if issubclass(w.category, DataWarning):
            if not quiet:
                print(f"benchkit: warning: {w.message}", file=sys.stderr)
        else:
            warnings.showwarning(w.message, w.category, w.filename, w.lineno)
