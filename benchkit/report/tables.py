"""Comparison tables built from the store's frames (data only; :mod:`.render` formats them).

Every builder takes the long metrics frame (``Store.metrics_frame()``) or the cells frame
(``Store.cells_frame()``) and returns a :class:`Table`: a title, headers, rows of cells and the
notes (cautions, remarks) that must be printed with it.

Aggregation used throughout: for each detector variant and seed, the metric is averaged over
every dataset entity of the clean (unperturbed) run; the table shows the mean and the sample
standard deviation (ddof=1) of those per-seed averages. With one seed there is no spread and only
the mean is shown. NaN values (e.g. a detection delay when nothing was detected) are skipped.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from benchkit.report import cautions
from benchkit.stats import average_ranks, critical_difference, friedman_test
from benchkit.sweep import sweep_summary

CLEAN = "none"
REFERENCE = "random"
THRESHOLD_FREE = frozenset({"roc_auc", "pr_auc", "random_pa_f1"})
LOWER_IS_BETTER = frozenset({"delay_mean", "delay_median"})
STRATEGIES = ("oracle", "pot", "quantile", "alert-budget", "alert-budget-oracle")
PEEKING = frozenset({"oracle", "alert-budget-oracle"})
DEFAULT_COLUMNS = (
    "f1",
    "pa_f1",
    "pak_auc_f1",
    "delay_f1",
    "range_f1",
    "event_recall",
    "roc_auc",
    "pr_auc",
)
MARGIN_HEADER = "PA-F1 margin over random"
EXPECTED_HEADER = "random PA-F1 (expected)"


@dataclass(frozen=True)
class Stat:
    """One number (optionally mean ± std) with a flag for the best value of its column."""

    mean: float
    std: float = math.nan
    best: bool = False
    digits: int = 3
    signed: bool = False

    def text(self) -> str:
        """Plain text, e.g. ``0.812 ± 0.010``; ``n/a`` for NaN."""
        if not np.isfinite(self.mean):
            return "n/a"
        sign = "+" if self.signed else ""
        out = f"{self.mean:{sign}.{self.digits}f}"
        if np.isfinite(self.std):
            out += f" ± {self.std:.{self.digits}f}"
        return out


Cell = Stat | str | int


@dataclass(frozen=True)
class Table:
    """A titled table with the notes that belong to it; ``name`` is the file stem."""

    name: str
    title: str
    headers: tuple[str, ...]
    rows: tuple[tuple[Cell, ...], ...]
    notes: tuple[str, ...] = ()
    data: pd.DataFrame = field(default_factory=pd.DataFrame, compare=False)


def metric_threshold(metric: str, threshold: str) -> str:
    """The store's ``threshold`` value for ``metric``: ``"none"`` for threshold-free metrics."""
    return "none" if metric in THRESHOLD_FREE else threshold


def seed_summary(frame: pd.DataFrame, metric: str, threshold: str) -> pd.DataFrame:
    """Per variant: mean and std over seeds of the entity-averaged clean ``metric``.

    Returns a frame indexed by variant with columns ``mean``, ``std`` (NaN with one seed),
    ``n_seeds`` and ``n_entities``.
    """
    sel = frame[
        (frame["metric"] == metric)
        & (frame["threshold"] == metric_threshold(metric, threshold))
        & (frame["perturbation"] == CLEAN)
    ]
    if sel.empty:
        return pd.DataFrame(columns=["mean", "std", "n_seeds", "n_entities"], dtype=float)
    per_seed = sel.groupby(["variant", "seed"])["value"].mean()
    by_variant = per_seed.groupby(level="variant")
    blocks = sel["dataset"].astype(str) + "/" + sel["entity"].astype(str)
    return pd.DataFrame(
        {
            "mean": by_variant.mean(),
            "std": by_variant.std(ddof=1),
            "n_seeds": by_variant.size(),
            "n_entities": blocks.groupby(sel["variant"]).nunique(),
        }
    )


def best_flags(values: pd.Series, lower_is_better: bool = False) -> pd.Series:
    """True where a value equals the column's best (max, or min); ties are all marked."""
    finite = values[np.isfinite(values.astype(float))]
    if finite.empty:
        return pd.Series(False, index=values.index)
    best = finite.min() if lower_is_better else finite.max()
    return pd.Series(np.isclose(values.astype(float), best, rtol=0.0, atol=1e-12), values.index)


def _order_variants(variants: Sequence[str]) -> list[str]:
    """Sorted variants with the random reference last."""
    rest = sorted(v for v in variants if v != REFERENCE)
    return rest + ([REFERENCE] if REFERENCE in variants else [])


def comparison_table(
    metrics: pd.DataFrame,
    threshold: str = "oracle",
    columns: Sequence[str] = DEFAULT_COLUMNS,
) -> Table:
    """Detectors × metrics for one threshold strategy, with the random reference and PA inflation.

    Parameters
    ----------
    metrics : the store's long metrics frame.
    threshold : ``oracle``, ``pot`` or ``quantile`` (threshold-free metrics use ``none``).
    columns : metric names to show; names the run does not have are left out.

    Returns
    -------
    Table whose ``data`` frame has one row per variant and columns ``<metric>_mean`` /
    ``<metric>_std``, ``pa_margin`` and ``random_pa_f1``.
    """
    present = set(metrics["metric"].unique()) if not metrics.empty else set()
    shown = [m for m in columns if m in present]
    summaries = {m: seed_summary(metrics, m, threshold) for m in shown}
    variants = set()
    for s in summaries.values():
        variants.update(s.index)
    order = _order_variants(sorted(variants))
    data = pd.DataFrame(index=pd.Index(order, name="variant"))
    for m, s in summaries.items():
        data[f"{m}_mean"] = s["mean"].reindex(order).astype(float)
        data[f"{m}_std"] = s["std"].reindex(order).astype(float)
    notes: list[str] = []
    pa = seed_summary(metrics, "pa_f1", threshold)["mean"].reindex(order).astype(float)
    if REFERENCE in order:
        data["pa_margin"] = pa - pa.get(REFERENCE, math.nan)
    else:
        data["pa_margin"] = math.nan
        notes.append(
            "This run has no 'random' reference detector, so the PA-F1 margin over random cannot "
            "be shown; add the 'random' detector to the spec."
        )
    expected = seed_summary(metrics, "random_pa_f1", "none")["mean"]
    data["random_pa_f1"] = expected.reindex(order).astype(float)

    best = {m: best_flags(data[f"{m}_mean"], m in LOWER_IS_BETTER) for m in shown}
    rows = []
    for v in order:
        label = f"{v} (reference)" if v == REFERENCE else v
        cells: list[Cell] = [label]
        for m in shown:
            cells.append(Stat(data.at[v, f"{m}_mean"], data.at[v, f"{m}_std"], bool(best[m][v])))
        cells.append(Stat(data.at[v, "pa_margin"], signed=True))
        cells.append(Stat(data.at[v, "random_pa_f1"]))
        rows.append(tuple(cells))
    headers = ("detector", *shown, MARGIN_HEADER, EXPECTED_HEADER)
    n_seeds = int(max((s["n_seeds"].max() for s in summaries.values() if len(s)), default=0))
    notes.insert(
        0,
        f"Mean ± std over {n_seeds} seed(s) of the average over entities, clean data, "
        f"threshold: {threshold}. Bold (or * in plain text) marks each column's best. "
        f"'{EXPECTED_HEADER}' is the expected best PA-F1 of uniformly random scores on the "
        "same labels.",
    )
    if threshold in PEEKING:
        notes.append(cautions.ORACLE)
    notes.append(cautions.POINT_ADJUSTED)
    notes.append(cautions.NO_GUARANTEE)
    return Table(
        name=f"comparison-{threshold}",
        title=f"Detector comparison, threshold strategy '{threshold}'",
        headers=headers,
        rows=tuple(rows),
        notes=tuple(notes),
        data=data,
    )


TIMING_FIELDS = (
    ("fit_seconds", "fit (s)", "low", 3),
    ("score_seconds", "score (s)", "low", 3),
    ("points_per_second", "points/s", "high", 0),
    ("peak_memory_mb", "peak memory (MB)", "low", 1),
    ("attribute_seconds", "attribute (s)", "low", 3),
)


def timing_table(cells: pd.DataFrame) -> Table:
    """Mean fit, score and attribution seconds, points scored per second and peak memory per
    variant.

    Means are over the variant's successful cells (every entity, seed and perturbation); peak
    memory is the largest cell's. The ``cells`` column counts ok / all cells. Attribution time
    (only where a detector attributes and the events name culprits) is kept apart from scoring
    time; points per second count scoring only.
    """
    ok = cells[cells["status"] == "ok"]
    order = _order_variants(sorted(cells["variant"].unique()))
    grouped = ok.groupby("variant")
    data = pd.DataFrame(index=pd.Index(order, name="variant"))
    for column, _, _, _ in TIMING_FIELDS:
        values = ok[column] if column in ok else pd.Series(np.nan, index=ok.index)
        by = values.astype(float).groupby(ok["variant"])
        agg = by.max() if column == "peak_memory_mb" else by.mean()
        data[column] = agg.reindex(order).astype(float)
    data["n_ok"] = grouped.size().reindex(order).fillna(0).astype(int)
    data["n_cells"] = cells.groupby("variant").size().reindex(order).astype(int)
    flags = {}
    for column, _, direction, _ in TIMING_FIELDS:
        flags[column] = best_flags(data[column], lower_is_better=direction == "low")
    rows = []
    for v in order:
        cells_row: list[Cell] = [v]
        for column, _, _, digits in TIMING_FIELDS:
            cells_row.append(Stat(data.at[v, column], best=bool(flags[column][v]), digits=digits))
        cells_row.append(f"{data.at[v, 'n_ok']}/{data.at[v, 'n_cells']}")
        rows.append(tuple(cells_row))
    return Table(
        name="timing",
        title="Cost per cell",
        headers=("detector", *(h for _, h, _, _ in TIMING_FIELDS), "cells ok"),
        rows=tuple(rows),
        notes=(
            "Means over successful cells; peak memory is the largest cell's resident-memory "
            "high-water mark. Bold (or *) marks the cheapest or fastest. Timings depend on the "
            "machine and its load.",
        ),
        data=data,
    )


def entity_table(metrics: pd.DataFrame, metric: str, threshold: str) -> pd.DataFrame:
    """Rows ``dataset/entity``, columns variants: the clean ``metric`` averaged over seeds."""
    sel = metrics[
        (metrics["metric"] == metric)
        & (metrics["threshold"] == metric_threshold(metric, threshold))
        & (metrics["perturbation"] == CLEAN)
    ]
    block = sel["dataset"].astype(str) + "/" + sel["entity"].astype(str)
    table = sel.assign(block=block).pivot_table(
        index="block", columns="variant", values="value", aggfunc="mean"
    )
    return table.reindex(columns=_order_variants(list(table.columns)))


def rank_table(
    metrics: pd.DataFrame, metric: str = "f1", threshold: str = "oracle", alpha: float = 0.05
) -> Table:
    """Average ranks over entities, the Friedman test and the Nemenyi critical difference.

    Entities where some variant has no value (a failed cell) are left out, because the rank
    tests need complete blocks. ``data`` holds ``average_rank`` and ``mean`` per variant and
    the attributes ``friedman`` (statistic, p), ``cd`` and ``n_blocks``.
    """
    table = entity_table(metrics, metric, threshold)
    complete = table.dropna(axis=0, how="any")
    lower = metric in LOWER_IS_BETTER
    k, n = complete.shape[1], complete.shape[0]
    notes = [
        f"Ranks of '{metric}' (threshold: {metric_threshold(metric, threshold)}, clean data, "
        f"mean over seeds) on each of {n} entities; 1 = best, ties share the average rank "
        "(Demšar, JMLR 2006)."
    ]
    if len(table) > n:
        notes.append(f"{len(table) - n} entities with a failed cell are left out.")
    friedman, cd = (math.nan, math.nan), math.nan
    if k >= 2 and n >= 2:
        ranks = average_ranks(complete, higher_is_better=not lower)
        friedman = friedman_test(complete)  # the statistic does not depend on rank direction
        cd = critical_difference(k, n, alpha)
        notes.append(
            f"Friedman chi-square = {friedman[0]:.3f}, p = {friedman[1]:.4g} (k = {k} detectors, "
            f"N = {n} entities); Nemenyi critical difference CD = {cd:.3f} at alpha = {alpha:g}: "
            "two detectors differ significantly when their average ranks differ by at least CD."
        )
        if n < 10 or k < 5:
            notes.append(
                "With fewer than about 10 entities or 5 detectors the Friedman chi-square "
                "approximation is rough (common rule of thumb); read the p-value as indicative."
            )
    else:
        ranks = pd.Series(math.nan, index=complete.columns, dtype=float)
        notes.append(
            f"The rank tests need at least 2 detectors and 2 complete entities; this run has "
            f"{k} and {n}."
        )
    notes.append(cautions.NO_GUARANTEE)
    data = pd.DataFrame({"average_rank": ranks, "mean": complete.mean(axis=0)})
    data = data.sort_values("average_rank", kind="stable")
    best = data["average_rank"].min()
    rows = []
    for v in data.index:
        gap = data.at[v, "average_rank"] - best
        verdict = "n/a" if not np.isfinite(cd) else ("yes" if gap >= cd else "no")
        rows.append(
            (
                v,
                Stat(data.at[v, "average_rank"], best=bool(np.isclose(gap, 0.0)), digits=2),
                Stat(data.at[v, "mean"]),
                verdict,
            )
        )
    data.attrs.update({"friedman": friedman, "cd": cd, "n_blocks": n, "alpha": alpha})
    return Table(
        name="ranks",
        title=f"Average rank over entities by '{metric}'",
        headers=("detector", "average rank", f"mean {metric}", "worse than the best (Nemenyi)"),
        rows=tuple(rows),
        notes=tuple(notes),
        data=data,
    )


def robustness_table(metrics: pd.DataFrame, metric: str = "f1", threshold: str = "oracle") -> Table:
    """The noise sweep: ``metric`` at each level, relative drop, robustness index and rank.

    One block of rows per sweep (noise kind × applied to); the rank orders the variants of a
    sweep by robustness index (1 = most robust). See :mod:`benchkit.sweep` for the formulas.
    """
    summary = sweep_summary(metrics, metric, threshold)
    shown = metric_threshold(metric, threshold)
    if summary.empty:
        return Table(
            name="robustness",
            title=f"Robustness of '{metric}' to noise",
            headers=("detector",),
            rows=(),
            notes=("This run has no noise sweep ([[sweep]] in the spec).",),
            data=summary,
        )
    levels = [c for c in summary.columns if c.startswith("mean@")]
    summary = summary.copy()
    summary["rank"] = summary.groupby(["kind", "apply_to"])["robustness_index"].rank(
        ascending=metric in LOWER_IS_BETTER, method="average"
    )
    summary = summary.sort_values(["kind", "apply_to", "rank", "variant"], kind="stable")
    rows = []
    for rec in summary.to_dict("records"):
        rows.append(
            (
                rec["kind"],
                rec["apply_to"],
                rec["variant"],
                *(Stat(rec[c]) for c in levels),
                Stat(rec["relative_drop"]),
                Stat(rec["robustness_index"], best=rec["rank"] == 1),
                Stat(rec["rank"], digits=1),
            )
        )
    return Table(
        name="robustness",
        title=f"Robustness of '{metric}' (threshold: {shown}) to noise",
        headers=(
            "noise",
            "applied to",
            "detector",
            *(f"{metric} at {c.removeprefix('mean@')}" for c in levels),
            "relative drop",
            "robustness index",
            "rank",
        ),
        rows=tuple(rows),
        notes=(
            "Values are means over entities and seeds; level 0 is the clean run. Relative drop = "
            "(value at 0 - value at the largest level) / value at 0. Robustness index = area "
            "under the value-versus-level curve (trapezoid rule on the actual levels) / (value "
            "at 0 × level range); 1 = no loss. Rank 1 = most robust within its sweep (bold). "
            "The random reference ignores its input, so it is robust by construction: judge "
            "robustness together with the clean value.",
            cautions.NO_GUARANTEE,
        ),
        data=summary,
    )
