"""Alert budgets on the public data: what each budget gives on test, to choose the default.

The ``alert-budget`` threshold is the lowest one whose false alerts per day on the train scores
(after warm-up) stay within the budget. Train counts as normal operation, so the budget holds on
train by construction; this study measures what it means on the *test* part, where incidents
happen: for budgets of 0.25 to 8 false alerts per day, per detector, over every entity of the
server-machine data (Su et al., KDD 2019) and the application-server data (Li et al., KDD 2021):

* event recall (share of labelled events with a predicted step);
* false alerts per day on test, and the share of cells whose test rate stays within the budget;
* median time to detect, in minutes.

Medians are over the cells (entities x seeds) of each dataset. The scores are those of the public
experiment (``datasets/public-experiment.toml``, merge_gap 0): the study reads the score cache of
a public run (``--work DIR``; without one it first runs the experiment there, about 3 minutes on
2 cores) and never fits anything itself. Writes ``results/public-alert-budget-study.md`` and
``.csv``.

Run: ``.venv/bin/python benchmarks/public_alert_budget_study.py [--work DIR] [--data-root ROOT]``.
A benchmark result is no guarantee for a production system: the budget that suits an operator
depends on their pages, their incidents and their data.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from public_run import DATASET_TITLES, default_root, run  # noqa: E402

from benchkit.metrics import alert_metrics, event_recall  # noqa: E402
from benchkit.report import render_table, render_tables  # noqa: E402
from benchkit.report.tables import Table  # noqa: E402
from benchkit.store import Store  # noqa: E402
from benchkit.thresholds import alert_budget_threshold, calibration_scores  # noqa: E402

BUDGETS = (0.25, 0.5, 1.0, 2.0, 4.0, 8.0)
MERGE_GAP = 0  # as in datasets/public-experiment.toml
OUT_MD = ROOT / "results" / "public-alert-budget-study.md"
OUT_CSV = ROOT / "results" / "public-alert-budget-study.csv"


def cell_rows(scores: dict, budgets: tuple[float, ...]) -> list[dict]:
    """What each budget gives on one cell's test part."""
    step = float(scores["step_seconds"])
    calib = calibration_scores(np.asarray(scores["train_scores"]), int(scores["warmup"]))
    test, labels = np.asarray(scores["test_scores"]), np.asarray(scores["labels"])
    rows = []
    for budget in budgets:
        theta = alert_budget_threshold(calib, budget, MERGE_GAP, step).threshold
        pred = test >= theta
        got = alert_metrics(pred, labels, MERGE_GAP, step)
        rows.append({
            "budget": budget,
            "event_recall": event_recall(pred, labels),
            "test_false_alerts_per_day": got["false_alerts_per_day"],
            "within_budget": got["false_alerts_per_day"] <= budget,
            "ttd_median_minutes": got["ttd_median_minutes"],
        })
    return rows


def measure(work: Path, budgets: tuple[float, ...]) -> pd.DataFrame:
    """One row per (cell, budget) of the latest run in ``work``."""
    rows = []
    with Store(work) as store:
        cells = store.cells_frame()
        cells = cells[(cells["status"] == "ok") & (cells["noise_kind"] == "none")]
        for cell in cells.itertuples():
            scores = store.load_scores(cell.cell_key)
            for row in cell_rows(scores, budgets):
                rows.append({"dataset": cell.dataset, "variant": cell.variant,
                             "entity": cell.entity, "seed": cell.seed, **row})
    return pd.DataFrame(rows)


def summary(frame: pd.DataFrame) -> pd.DataFrame:
    """Per dataset, variant and budget: medians over cells, and the share within budget."""
    grouped = frame.groupby(["dataset", "variant", "budget"], sort=True)
    return grouped.agg(
        cells=("entity", "size"),
        event_recall=("event_recall", "median"),
        test_false_alerts_per_day=("test_false_alerts_per_day", "median"),
        within_budget=("within_budget", "mean"),
        ttd_median_minutes=("ttd_median_minutes", "median"),
    ).reset_index()


def across_detectors(table: pd.DataFrame) -> pd.DataFrame:
    """Per dataset and budget: the median of the detectors' medians (``random`` left out)."""
    real = table[table["variant"] != "random"]
    return real.groupby(["dataset", "budget"], sort=True).agg(
        event_recall=("event_recall", "median"),
        test_false_alerts_per_day=("test_false_alerts_per_day", "median"),
        within_budget=("within_budget", "median"),
        ttd_median_minutes=("ttd_median_minutes", "median"),
    ).reset_index()


def as_table(frame: pd.DataFrame, name: str, title: str, notes: tuple[str, ...] = ()) -> Table:
    """A report table of ``frame``: three decimals, minutes as whole numbers ("-" where none)."""
    shown = frame.copy()
    for col in ("event_recall", "test_false_alerts_per_day", "within_budget"):
        shown[col] = shown[col].map(lambda v: f"{v:.3f}")
    shown["ttd_median_minutes"] = shown["ttd_median_minutes"].map(
        lambda v: "-" if not np.isfinite(v) else f"{v:.0f}")
    rows = tuple(tuple(str(v) for v in row) for row in shown.to_numpy())
    return Table(name, title, tuple(shown.columns), rows, notes)


NOTES = (
    "Medians over the cells (entities x seeds) of each dataset, merge_gap 0.",
    "within_budget: share of cells whose false alerts per day on test stay within the budget "
    "(calibrated on train, where it holds by construction).",
    "A benchmark result is no guarantee for a production system.",
)


def tables(table: pd.DataFrame, overall: pd.DataFrame) -> list[Table]:
    """The median over the detectors first, then one table per dataset."""
    out = [as_table(overall, "overall", "Median over the detectors (random left out)", NOTES)]
    for dataset in sorted(set(table["dataset"])):
        part = table[table["dataset"] == dataset].drop(columns="dataset")
        out.append(as_table(part, dataset, DATASET_TITLES.get(dataset, dataset)))
    return out


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--work", type=Path, default=None,
                        help="a public run's folder (run there first when it has no store)")
    parser.add_argument("--data-root", type=Path, default=None, help="public data folder")
    args = parser.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="benchkit-budget-") as temp:
        work = args.work or Path(temp)
        if not (work / "results.sqlite").exists():
            seconds = run(args.data_root or default_root(), None, work)
            print(f"public experiment run in {seconds:.1f} s")
        frame = measure(work, BUDGETS)
    table = summary(frame)
    overall = across_detectors(table)
    OUT_CSV.write_text(table.to_csv(index=False), encoding="utf-8")
    shown = tables(table, overall)
    head = ("# Alert budgets on the public data\n\nWritten by "
            "`benchmarks/public_alert_budget_study.py` from the score cache of the public "
            "experiment.\n\n")
    OUT_MD.write_text(head + render_tables(shown, "md"), encoding="utf-8")
    print(render_table(shown[0], "plain"))
    print(f"wrote {OUT_MD.relative_to(ROOT)} and {OUT_CSV.relative_to(ROOT)}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
