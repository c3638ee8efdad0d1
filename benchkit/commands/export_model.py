"""``benchkit export-model OUT --variant LABEL --entity NAME
[--threshold pot|quantile|alert-budget] --to BUNDLE``: refit one measured cell and write it,
with its threshold, as a bundle folder.

See :mod:`benchkit.deploy.export` for the checks made before anything is written.
"""

from __future__ import annotations

import argparse

from benchkit.deploy.export import THRESHOLDS, export_model
from benchkit.errors import SpecError


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "export-model",
        help="export a measured detector with its calibrated threshold as a bundle",
        description="Refit the clean cell of variant LABEL on entity NAME from the latest run "
        "in OUT, check that it reproduces the cached scores bit for bit, and write a bundle "
        "folder (manifest, fitted state, context rows, calibration scores) that "
        "'benchkit apply' reads.",
    )
    p.add_argument("out", metavar="OUT", help="results folder written by benchkit run")
    p.add_argument("--variant", required=True, metavar="LABEL", help="detector variant label")
    p.add_argument("--entity", required=True, metavar="NAME", help="dataset entity")
    p.add_argument("--threshold", default="pot", choices=THRESHOLDS,
                   help="threshold strategy to carry (default: pot)")  # fmt: skip
    p.add_argument("--to", required=True, metavar="BUNDLE", help="new bundle folder")
    p.add_argument("--seed", metavar="N", help="the cell's seed (default: the smallest)")
    p.add_argument("--dataset", metavar="NAME", help="dataset name, when the entity is ambiguous")
    p.add_argument("--data-root", metavar="DIR", help="root folder for dataset files")
    p.add_argument("--quiet", action="store_true", help="do not print the bundle path")
    p.set_defaults(func=main, numerics_of=run_numerics)


def run_numerics(args: argparse.Namespace) -> str:
    """The numeric path of the run's cells (pinned unless its spec says fast): the command runs
    on it, so that its checks against the cached scores compare like with like."""
    from benchkit.store import Store

    try:
        with Store(args.out) as store:
            spec = store.latest_run()["spec"]
        return str(spec.get("execution", {}).get("numerics", "pinned"))
    except Exception:  # noqa: BLE001 - the command itself reports a bad results folder
        return "pinned"


def _seed(text: str | None) -> int | None:
    if text is None:
        return None
    try:
        return int(text)
    except ValueError:
        raise SpecError(f"--seed: expected an integer, got {text!r}") from None


def main(args: argparse.Namespace) -> int:
    path = export_model(args.out, args.variant, args.entity, args.to, args.threshold,
                        seed=_seed(args.seed), dataset=args.dataset,
                        data_root=args.data_root)  # fmt: skip
    if not args.quiet:
        print(path)
    return 0
