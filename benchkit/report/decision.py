"""The decision summary: what an operator weighs before deploying a detector, first.

One compact table per realistic (label-free) threshold strategy in the run, one row per detector:
event recall and false alerts per day at that strategy's threshold, median time to detect,
realistic F1 with its margin over the ``random`` reference, fit and score cost, and whether the
detector is statistically tied with the best (Friedman / Nemenyi on F1 over entities). A sentence
under each table names the tied-best group. Values are means over entities (and seeds) of the
clean run, as in :mod:`benchkit.report.tables`.

Common practice, no source: operators judge detectors by false alerts per day and time to detect.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from benchkit.report.tables import REFERENCE, Stat, Table, _order_variants, rank_table, seed_summary

REALISTIC = ("alert-budget", "pot", "quantile")
"""Label-free strategies, in the order their summaries are shown."""
HEADLINE = "f1"


def _mean(metrics: pd.DataFrame, metric: str, threshold: str) -> pd.Series:
    return seed_summary(metrics, metric, threshold)["mean"].astype(float)


def _rate(metrics: pd.DataFrame, threshold: str) -> tuple[pd.Series, str]:
    """False alerts per day where every entity has a step length, else per 1,000 steps."""
    per_day = _mean(metrics, "false_alerts_per_day", threshold)
    sel = metrics[(metrics["metric"] == "false_alerts_per_day")
                  & (metrics["threshold"] == threshold)]  # fmt: skip
    if len(per_day) and not sel["value"].isna().any():
        return per_day, "false alerts / day"
    return _mean(metrics, "false_alerts_per_1k_steps", threshold), "false alerts / 1k steps"


def _time_to_detect(metrics: pd.DataFrame, threshold: str) -> tuple[pd.Series, str]:
    minutes = _mean(metrics, "ttd_median_minutes", threshold)
    if len(minutes) and np.isfinite(minutes.to_numpy()).any():
        return minutes, "median time to detect (min)"
    return _mean(metrics, "ttd_median_steps", threshold), "median time to detect (steps)"


def tied_with_best(metrics: pd.DataFrame, threshold: str) -> tuple[pd.Series, Table]:
    """Per variant: ``"yes"`` when its average rank on F1 is within the Nemenyi critical
    difference of the best, ``"no"`` otherwise, ``"n/a"`` without the rank tests."""
    ranks = rank_table(metrics, HEADLINE, threshold)
    data = ranks.data
    cd = data.attrs.get("cd", math.nan)
    if not np.isfinite(cd) or data["average_rank"].isna().all():
        return pd.Series("n/a", index=data.index, dtype=object), ranks
    gap = data["average_rank"] - data["average_rank"].min()
    return pd.Series(np.where(gap < cd, "yes", "no"), index=data.index, dtype=object), ranks


def decision_table(metrics: pd.DataFrame, cells: pd.DataFrame, threshold: str) -> Table:
    """The decision summary of one realistic strategy (see the module docstring)."""
    recall = _mean(metrics, "event_recall", threshold)
    rate, rate_header = _rate(metrics, threshold)
    ttd, ttd_header = _time_to_detect(metrics, threshold)
    f1 = _mean(metrics, HEADLINE, threshold)
    tied, ranks = tied_with_best(metrics, threshold)
    order = _order_variants(sorted(set(f1.index) | set(recall.index)))
    margin = f1 - f1.get(REFERENCE, math.nan)
    ok = cells[cells["status"] == "ok"].groupby("variant")
    fit, score = ok["fit_seconds"].mean(), ok["score_seconds"].mean()
    rows = []
    for v in order:
        rows.append((
            f"{v} (reference)" if v == REFERENCE else v,
            Stat(recall.get(v, math.nan)),
            Stat(rate.get(v, math.nan), digits=2),
            Stat(ttd.get(v, math.nan), digits=1),
            Stat(f1.get(v, math.nan)),
            Stat(margin.get(v, math.nan), signed=True),
            Stat(fit.get(v, math.nan)),
            Stat(score.get(v, math.nan)),
            str(tied.get(v, "n/a")),
        ))  # fmt: skip
    best = [v for v in tied.index if tied[v] == "yes"]
    cd = ranks.data.attrs.get("cd", math.nan)
    if best:
        sentence = (f"Tied with the best on F1 under '{threshold}' (Nemenyi, CD = {cd:.2f} over "
                    f"{ranks.data.attrs.get('n_blocks', 0)} entities): {', '.join(best)}.")
    else:
        sentence = (f"No tied-best group under '{threshold}': the rank tests need at least 2 "
                    "detectors and 2 entities without a failed cell.")
    notes = [sentence, _note(threshold, rate_header)]
    if REFERENCE not in order:
        notes.append("This run has no 'random' reference detector, so the F1 margin over random "
                     "cannot be shown.")
    data = pd.DataFrame({"event_recall": recall, "false_alert_rate": rate, "ttd": ttd,
                         "f1": f1, "f1_margin": margin, "tied": tied}).reindex(order)
    data.attrs.update({"tied_best": best, "rate_unit": rate_header, "ttd_unit": ttd_header})
    return Table(
        name=f"decision-{threshold}",
        title=f"Decision summary, threshold strategy '{threshold}'",
        headers=("detector", "event recall", rate_header, ttd_header, "F1",
                 "F1 margin over random", "fit (s)", "score (s)", "tied with best"),
        rows=tuple(rows),
        notes=tuple(notes),
        data=data,
    )


def _note(threshold: str, rate_header: str) -> str:
    text = (f"Means over entities of the clean run, threshold '{threshold}' (set without test "
            f"labels). Event recall: share of labelled events with a predicted step; "
            f"{rate_header}: alerts that overlap no labelled event, over the test duration; "
            "time to detect: first predicted step minus the event's start, over detected "
            "events; fit and score: seconds per cell.")
    if threshold == "alert-budget":
        text += (" The alert budget is met on train (normal operation); on test the false "
                 "alert rate can differ.")
    return text


def decision_tables(metrics: pd.DataFrame, cells: pd.DataFrame) -> list[Table]:
    """One decision summary per realistic strategy the run has (alert budget first)."""
    present = set(metrics["threshold"]) if not metrics.empty else set()
    return [decision_table(metrics, cells, s) for s in REALISTIC if s in present]

