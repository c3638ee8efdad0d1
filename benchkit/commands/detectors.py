"""``benchkit detectors`` (list), ``benchkit detectors show NAME`` and ``benchkit check-detector``.

``check-detector NAME|module:Class`` runs the contract kit (:mod:`benchkit.testing`), prints a
table of passed, failed and skipped checks, and exits 0 when all pass, 1 when any fails and 2 for
bad input (unknown detector, bad ``--param``).
"""

from __future__ import annotations

import argparse
import sys
import warnings
from typing import Any

from tabulate import tabulate

from benchkit import registry
from benchkit.commands._args import parse_key_value
from benchkit.detector import Detector
from benchkit.errors import ParamError
from benchkit.testing import run_checks

_NAME_HELP = "a registered name, pyod:<Model> or module:Class"


def add_parser(subparsers) -> None:
    """Register ``detectors`` and ``check-detector`` on the CLI's subparsers."""
    listing = subparsers.add_parser(
        "detectors",
        help="list the available detectors, or show one",
        description="List every registered detector with its hyperparameters and defaults; "
        "'detectors show NAME' describes one in full.",
    )
    listing.set_defaults(func=run_list)
    actions = listing.add_subparsers(dest="action", metavar="ACTION")
    show = actions.add_parser("show", help="describe one detector and its hyperparameters")
    show.add_argument("name", metavar="NAME", help=_NAME_HELP)
    show.set_defaults(func=run_show)

    check = subparsers.add_parser(
        "check-detector",
        help="run the detector contract checks on one detector",
        description="Fit and score a detector on small invented data and check the contract: "
        "parameters, output, causality, determinism, no mutation, d=1, constant channels, NaN "
        "refusal and speed. Exit 0: all passed; 1: some failed; 2: bad input.",
    )
    check.add_argument("name", metavar="NAME", help=_NAME_HELP)
    check.add_argument("--param", action="append", default=[], metavar="KEY=VALUE",
                       help="a hyperparameter (value read as TOML, else as text); repeatable")
    check.add_argument("--quick", action="store_true",
                       help="skip the checks that need extra fits (for slow models)")
    check.add_argument("--time-limit", type=float, default=10.0, metavar="S",
                       help="seconds allowed to score 10,000 steps (default: 10)")
    check.set_defaults(func=run_check)


def _quiet_registry() -> dict[str, str]:
    """Load the registry with its warnings held back; return the load errors to print."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        registry.available()
    return registry.load_errors()


def _report_load_errors(errors: dict[str, str]) -> None:
    for where, message in errors.items():
        print(f"benchkit: warning: detector plug-in {where} failed to load: {message}",
              file=sys.stderr)


def format_defaults(cls: type[Detector]) -> str:
    """``key=default`` for every hyperparameter, comma separated."""
    return ", ".join(f"{p.name}={p.default!r}" for p in cls.params) or "(none)"


def run_list(args: argparse.Namespace) -> int:
    """Print one row per registered detector."""
    errors = _quiet_registry()
    rows = []
    for name in registry.available():
        cls = registry.get(name)
        rows.append((name, cls.description, format_defaults(cls), "yes" if cls.needs_torch else ""))
    print(tabulate(rows, headers=("name", "description", "hyperparameters", "torch"),
                   tablefmt="simple", maxcolwidths=[None, 50, 60, None]))
    print("\nother PyOD models: pyod:<Model>; your own class: module:Class; "
          "details: benchkit detectors show NAME")
    _report_load_errors(errors)
    return 0


def run_show(args: argparse.Namespace) -> int:
    """Describe one detector: metadata, warm-up, and a table of its hyperparameters."""
    errors = _quiet_registry()
    cls = registry.get(args.name)
    print(f"{cls.name}: {cls.description}")
    print(f"class: {cls.__module__}.{cls.__qualname__}")
    print(f"needs torch: {'yes' if cls.needs_torch else 'no'}")
    print(f"warm-up with defaults: {registry.create(args.name).warmup} steps scored -inf")
    has_hint = cls.threshold_hint is not Detector.threshold_hint
    print(f"threshold hint: {'yes' if has_hint else 'no'}")
    rows = [(p.name, p.describe(), repr(p.default), p.help) for p in cls.params]
    if rows:
        print()
        print(tabulate(rows, headers=("hyperparameter", "accepts", "default", "meaning"),
                       tablefmt="simple"))
    _report_load_errors(errors)
    return 0


def parse_param(text: str) -> tuple[str, Any]:
    """``KEY=VALUE`` -> (key, value); the value is read as a TOML scalar, else kept as text."""
    return parse_key_value(text, "--param", ParamError)


def run_check(args: argparse.Namespace) -> int:
    """Run the contract kit on one detector; print the table; 0 all passed, 1 some failed."""
    errors = _quiet_registry()
    params = dict(parse_param(p) for p in args.param)
    detector = registry.create(args.name, where=args.name, **params)
    report = run_checks(detector, quick=args.quick, time_limit=args.time_limit)
    print(report.table())
    _report_load_errors(errors)
    return 0 if report.passed else 1
