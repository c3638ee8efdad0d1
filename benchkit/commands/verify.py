"""``benchkit verify SCORECARD``: re-run a scorecard's spec and compare every metric.

Exit status 0 when every value agrees within the tolerance, 1 when some differ, 2 for bad input
(missing or malformed file, a digest that does not match, an invalid spec). Where the numeric
environments differ (another architecture, other library versions, ``numerics = "fast"``), the
differences are split into those within the scorecard's spread over seeds (a platform change can
explain them) and those beyond it; the exit status is still 1.
"""

from __future__ import annotations

import argparse
from pathlib import Path

from benchkit.report import differences_table, render_table, verify_scorecard
from benchkit.report.verify import platform_lines


def add_parser(subparsers) -> None:
    """Register ``verify`` on the CLI's subparsers."""
    parser = subparsers.add_parser(
        "verify",
        help="re-run what a scorecard describes and compare every metric",
        description=(
            "Check the scorecard's digest, re-run its spec and list every metric that differs "
            "from the scorecard by more than the tolerance. Exit 0: reproduced; 1: not "
            "reproduced; 2: bad input."
        ),
    )
    parser.add_argument("scorecard", type=Path, metavar="SCORECARD", help="a scorecard.json")
    parser.add_argument("--tolerance", type=float, default=1e-9, metavar="T",
                        help="largest absolute difference counted as equal (default: 1e-9)")
    parser.add_argument("--fresh", action="store_true",
                        help="recompute every cell, never reuse a results store's cache")
    parser.add_argument("--out", type=Path, default=None, metavar="DIR",
                        help="re-run into DIR (default: the scorecard's folder when it holds the "
                             "results store, else a temporary folder removed afterwards)")
    parser.add_argument("--workers", type=int, default=None, metavar="N",
                        help="local worker processes (default: the spec's setting)")
    parser.add_argument("--data-root", type=Path, default=None, metavar="DIR",
                        help="root folder of the public data for dataset TOMLs that need one "
                             "(default: $BENCHKIT_DATA_ROOT)")
    parser.add_argument("--spec-dir", type=Path, default=None, metavar="DIR",
                        help="folder that relative dataset paths in the scorecard's spec are "
                             "read from: where the original spec file was (default: .)")
    parser.add_argument("--quiet", action="store_true", help="print only the verdict line")
    parser.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    """Verify, print the differences (if any) and the verdict; return the exit status."""
    result = verify_scorecard(args.scorecard, args.tolerance, args.fresh, args.out,
                              workers=args.workers, data_root=args.data_root,
                              spec_dir=args.spec_dir)
    if not args.quiet and not (result.reproduced and result.exact_expected):
        print("\n".join(platform_lines(result)))
    if result.reproduced:
        print(f"reproduced: all {result.n_values} values of {result.n_cells} cells agree "
              f"within {result.tolerance:g}")
        return 0
    if not args.quiet:
        print(render_table(differences_table(result), "plain"))
    n_bad = len(result.differences) + len(result.fingerprint_mismatches)
    print(f"not reproduced: {n_bad} values differ beyond {result.tolerance:g} "
          f"({result.n_values} values of {result.n_cells} cells compared)")
    if not result.exact_expected:
        n_seedless = sum(d.seed_spread is None for d in result.differences)
        print(f"platform: {result.n_explained} of them lie within the scorecard's spread over "
              f"seeds (a platform change can explain them), "
              f"{n_bad - result.n_explained} do not"
              + (f" ({n_seedless} have no seed spread: the scorecard holds one seed)"
                 if n_seedless else ""))
    return 1
