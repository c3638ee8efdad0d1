"""``benchkit report OUT``: print the comparison tables and (re)write every report file."""

from __future__ import annotations

import argparse
from pathlib import Path

from benchkit.report import FORMATS, write_all
from benchkit.report.tables import STRATEGIES


def add_parser(subparsers) -> None:
    """Register ``report`` on the CLI's subparsers."""
    parser = subparsers.add_parser(
        "report",
        help="print the tables of a results folder and write its report files",
        description=(
            "Print the decision summary (alerts, detection, cost, ties per label-free threshold "
            "strategy) and then the comparison, uncertainty, timing, robustness and rank tables "
            "of a results folder; write OUT/tables/*, OUT/plots/*.png, OUT/report.html and "
            "OUT/scorecard.json."
        ),
    )
    parser.add_argument("out", type=Path, metavar="OUT", help="a folder written by benchkit run")
    parser.add_argument("--format", choices=FORMATS, default="md",
                        help="table format for the screen and OUT/tables (default: md)")
    parser.add_argument("--metric", default="f1",
                        help="metric for the robustness and rank tables and the plots "
                             "(default: f1)")
    parser.add_argument("--threshold", choices=STRATEGIES, default=None,
                        help="threshold strategy to show (default: every strategy in the run; "
                             "the first of oracle, pot, quantile, alert-budget for ranks and "
                             "plots)")
    parser.add_argument("--quiet", action="store_true", help="print nothing; only write files")
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Write the report files, then print the tables and where everything went."""
    written = write_all(args.out, args.format, metric=args.metric, threshold=args.threshold)
    if args.quiet:
        return 0
    tables = [p for name, p in written.items() if name.startswith("table:")]
    print("\n".join(p.read_text(encoding="utf-8") for p in tables))
    print(f"report: {written['html']}")
    print(f"scorecard: {written['scorecard']}")
    return 0
