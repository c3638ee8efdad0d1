"""Bootstrap intervals for F1 and PA-F1 (issue 8): one table per threshold strategy.

For each detector variant the clean cells of one seed (the smallest in the run) are pooled: every
entity's prediction (cached test scores against the threshold the protocol stored for that
strategy) and labels are concatenated, with one unlabelled, unpredicted step between entities so
that events never merge across an entity boundary (the step is a true negative and changes no F1).
:func:`benchkit.stats.bootstrap_f1_ci` then resamples the pooled events.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from benchkit.report import cautions
from benchkit.report.tables import CLEAN, REFERENCE, Stat, Table, _order_variants, best_flags
from benchkit.stats import bootstrap_f1_ci
from benchkit.store import Store

N_RESAMPLES = 1000
RESAMPLE_SEED = 0
LEVEL = 0.95
# The stored threshold each (strategy, adjustment) predicts with; oracle tunes each separately.
_THRESHOLD_KEYS = {
    ("oracle", None): "threshold_oracle_f1",
    ("oracle", "point"): "threshold_oracle_pa_f1",
    ("pot", None): "threshold_pot",
    ("pot", "point"): "threshold_pot",
    ("quantile", None): "threshold_quantile",
    ("quantile", "point"): "threshold_quantile",
    ("alert-budget", None): "threshold_alert_budget",
    ("alert-budget", "point"): "threshold_alert_budget",
    ("alert-budget-oracle", None): "threshold_alert_budget_oracle",
    ("alert-budget-oracle", "point"): "threshold_alert_budget_oracle",
}


@dataclass(frozen=True)
class CachedRun:
    """Cached clean scores of one seed: variant -> one ``Store.load_scores`` dict per entity."""

    seed: int
    scores: Mapping[str, Sequence[Mapping]]


def load_clean_scores(store: Store, cells: pd.DataFrame) -> CachedRun:
    """The cached scores of every successful clean cell of the run's smallest seed."""
    ok = cells[(cells["status"] == "ok") & (cells["perturbation"] == CLEAN)]
    if ok.empty:
        return CachedRun(seed=0, scores={})
    seed = int(ok["seed"].min())
    picked = ok[ok["seed"] == seed].sort_values(["variant", "dataset", "entity"])
    scores: dict[str, list[Mapping]] = {}
    for row in picked.itertuples():
        scores.setdefault(row.variant, []).append(store.load_scores(row.cell_key))
    return CachedRun(seed=seed, scores=scores)


def pooled_prediction(
    entities: Sequence[Mapping], threshold: str, adjust: str | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """``(pred, labels)`` of the entities concatenated, one empty step between entities.

    Parameters
    ----------
    entities : ``Store.load_scores`` dicts.
    threshold : ``oracle``, ``pot`` or ``quantile``.
    adjust : ``None`` (point-wise F1's threshold) or ``"point"`` (PA-F1's; differs for oracle).
    """
    key = _THRESHOLD_KEYS[(threshold, adjust)]
    gap_pred, gap_label = np.zeros(1, dtype=bool), np.zeros(1, dtype=np.int8)
    preds, labels = [], []
    for cached in entities:
        theta = float(cached.get(key, np.nan))
        preds += [np.asarray(cached["test_scores"], dtype=float) >= theta, gap_pred]
        labels += [np.asarray(cached["labels"]).astype(np.int8), gap_label]
    if not preds:
        return np.zeros(0, dtype=bool), np.zeros(0, dtype=np.int8)
    return np.concatenate(preds[:-1]), np.concatenate(labels[:-1])


def _n_events(labels: np.ndarray) -> int:
    y = labels.astype(bool)
    return int(np.count_nonzero(y & ~np.concatenate(([False], y[:-1]))))


def _interval(low: float, high: float) -> str:
    return "n/a" if not np.isfinite(low) else f"[{low:.3f}, {high:.3f}]"


def uncertainty_table(
    run: CachedRun, threshold: str = "oracle", n_boot: int = N_RESAMPLES, seed: int = RESAMPLE_SEED
) -> Table:
    """Pooled F1 and PA-F1 of each variant with percentile bootstrap intervals over events.

    Returns
    -------
    Table ``uncertainty-<threshold>`` whose ``data`` frame has, per variant, ``entities``,
    ``events`` and ``f1``, ``f1_low``, ``f1_high``, ``pa_f1``, ``pa_f1_low``, ``pa_f1_high``.
    """
    order = _order_variants(sorted(run.scores))
    records = []
    for v in order:
        record = {"entities": len(run.scores[v])}
        for name, adjust in (("f1", None), ("pa_f1", "point")):
            pred, labels = pooled_prediction(run.scores[v], threshold, adjust)
            ci = bootstrap_f1_ci(pred, labels, n_boot, LEVEL, seed, adjust=adjust)
            record.update({"events": _n_events(labels), name: ci.estimate,
                           f"{name}_low": ci.low, f"{name}_high": ci.high})
        records.append(record)
    data = pd.DataFrame(records, index=pd.Index(order, name="variant"))
    rows = []
    if order:
        best = {m: best_flags(data[m]) for m in ("f1", "pa_f1")}
        for v in order:
            rows.append((
                f"{v} (reference)" if v == REFERENCE else v,
                int(data.at[v, "entities"]),
                int(data.at[v, "events"]),
                Stat(data.at[v, "f1"], best=bool(best["f1"][v])),
                _interval(data.at[v, "f1_low"], data.at[v, "f1_high"]),
                Stat(data.at[v, "pa_f1"], best=bool(best["pa_f1"][v])),
                _interval(data.at[v, "pa_f1_low"], data.at[v, "pa_f1_high"]),
            ))
    pct = f"{LEVEL:.0%}"
    notes = [
        f"Clean data, seed {run.seed} only (the run's first seed; other seeds are not averaged), "
        f"threshold: {threshold}. Each detector's entities are pooled: their predictions (cached "
        "test scores against each entity's stored threshold"
        + (", tuned separately for F1 and PA-F1" if threshold == "oracle" else "")
        + ") and labels are concatenated and F1 is computed once, so it differs from the "
        "comparison table's mean over entities.",
        f"Intervals: {pct} percentile bootstrap, {n_boot} resamples (resampling seed {seed}) of "
        "the pooled labelled events, each event drawn with the normal steps that follow it up to "
        "the next event. With few events the intervals are wide and rough; overlapping intervals "
        "do not show that two detectors are equal.",
    ]
    if order and REFERENCE not in order:
        notes.append("This run has no 'random' reference detector; add it to the spec.")
    if threshold in ("oracle", "alert-budget-oracle"):
        notes.append(cautions.ORACLE)
    notes.append(cautions.POINT_ADJUSTED)
    return Table(
        name=f"uncertainty-{threshold}",
        title=f"F1 with {pct} bootstrap intervals over events, threshold strategy '{threshold}'",
        headers=("detector", "entities", "events", "F1", f"F1 {pct} interval", "PA-F1",
                 f"PA-F1 {pct} interval"),
        rows=tuple(rows),
        notes=tuple(notes),
        data=data,
    )
