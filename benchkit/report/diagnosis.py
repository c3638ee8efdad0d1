"""Diagnosis tables: which KPIs a detector blames (HitRate@P%, NDCG@P%), and which incident kinds
it catches. Both read only the store's metrics frame (the protocol computed the per-cell values).

Aggregation: the diagnosis means follow :func:`benchkit.report.tables.seed_summary` (average over
entities, then mean ± std over seeds, clean data); event counts and per-kind recall are pooled
over entities (events of all entities together), then averaged over seeds.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence

import numpy as np
import pandas as pd

from benchkit.report import cautions
from benchkit.report.tables import (
    CLEAN,
    REFERENCE,
    STRATEGIES,
    Stat,
    Table,
    _order_variants,
    best_flags,
    seed_summary,
)

NO_ATTRIBUTION = "no attribution"
_HIT = re.compile(r"hit_rate@(\d+)$")
_KIND = re.compile(r"event_recall\[(.+)\]$")


def _clean(metrics: pd.DataFrame) -> pd.DataFrame:
    return metrics[metrics["perturbation"] == CLEAN]


def _pooled(metrics: pd.DataFrame, metric: str, threshold: str) -> pd.Series:
    """Per variant: the sum over entities of ``metric``, averaged over seeds."""
    sel = metrics[(metrics["metric"] == metric) & (metrics["threshold"] == threshold)]
    if sel.empty:
        return pd.Series(dtype=float)
    return sel.groupby(["variant", "seed"])["value"].sum().groupby(level="variant").mean()


def _strategies(metrics: pd.DataFrame, realistic: bool = False) -> list[str]:
    present = set(metrics["threshold"]) - {"none"}
    if realistic:  # no strategy that tunes on the test labels
        present = {s for s in present if "oracle" not in s}
    return [s for s in STRATEGIES if s in present] + sorted(present - set(STRATEGIES))


def diagnosis_table(metrics: pd.DataFrame, threshold: str) -> Table:
    """Per detector, at one threshold strategy: HitRate@P% for each P, NDCG at the largest P,
    events diagnosed, and the HitRate margin over random attribution on the same events.

    ``data`` has one row per variant with ``hit_rate@P_mean``/``_std``, ``ndcg@P_mean``/``_std``,
    ``diagnosed``, ``culprit_events`` and ``margin``.
    """
    clean = _clean(metrics)
    name, title = f"diagnosis-{threshold}", f"Diagnosis: culprit KPIs, threshold '{threshold}'"
    culprit_events = _pooled(clean, "culprit_events", "none")
    if culprit_events.empty:
        return Table(name, title, ("detector",), (), (
            "The data of this run names no culprit KPIs for its events, so diagnosis "
            "(HitRate@P%, NDCG@P%) cannot be measured.",), pd.DataFrame())
    ps = sorted({int(m.group(1)) for m in map(_HIT.match, clean["metric"].unique()) if m})
    variants = _order_variants(sorted(clean["variant"].unique()))
    data = pd.DataFrame(index=pd.Index(variants, name="variant"))
    shown = [f"hit_rate@{p}" for p in ps] + ([f"ndcg@{ps[-1]}"] if ps else [])
    for m in shown:
        s = seed_summary(clean, m, threshold)
        data[f"{m}_mean"] = s["mean"].reindex(variants).astype(float)
        data[f"{m}_std"] = s["std"].reindex(variants).astype(float)
    data["diagnosed"] = _pooled(clean, "diagnosed_events", threshold).reindex(variants)
    data["culprit_events"] = culprit_events.reindex(variants)
    margin = math.nan
    if ps:
        top = ps[-1]
        gap = clean[clean["metric"].isin([f"hit_rate@{top}", f"chance_hit_rate@{top}"])
                    & (clean["threshold"] == threshold)]  # fmt: skip
        wide = gap.pivot_table(index=["variant", "seed", "dataset", "entity"],
                               columns="metric", values="value")  # fmt: skip
        if {f"hit_rate@{top}", f"chance_hit_rate@{top}"} <= set(wide.columns):
            diff = (wide[f"hit_rate@{top}"] - wide[f"chance_hit_rate@{top}"]).dropna()
            margin = diff.groupby(level=["variant", "seed"]).mean().groupby(level="variant").mean()
    data["margin"] = margin.reindex(variants) if isinstance(margin, pd.Series) else math.nan
    best = {m: best_flags(data[f"{m}_mean"]) for m in shown}
    rows = []
    for v in variants:
        label = f"{v} (reference)" if v == REFERENCE else v
        if not np.isfinite(data.at[v, "diagnosed"]):
            rows.append((label, *([NO_ATTRIBUTION] * (len(shown) + 2))))
            continue
        cells = [Stat(data.at[v, f"{m}_mean"], data.at[v, f"{m}_std"], bool(best[m][v]))
                 for m in shown]  # fmt: skip
        diagnosed = f"{data.at[v, 'diagnosed']:.4g}/{data.at[v, 'culprit_events']:.4g}"
        rows.append((label, *cells, diagnosed, Stat(data.at[v, "margin"], signed=True)))
    headers = ("detector", *(f"HitRate@{p}%" for p in ps),
               *(f"NDCG@{ps[-1]}%" for _ in ps[-1:]), "events diagnosed",
               *(f"HitRate@{ps[-1]}% margin over random attribution" for _ in ps[-1:]))
    notes = [
        "HitRate@P% (Su et al., KDD 2019): share of an event's culprit KPIs among the "
        "floor(P% x their number) channels the detector blames most; NDCG@P% weighs them by "
        "rank. Each event's value is the mean over its detected points; undetected events are "
        "not diagnosed. Mean ± std over seeds of the average over entities, clean data.",
        "Events diagnosed: events with culprit labels that the threshold detected, of all "
        "events with culprit labels (summed over entities). The margin compares each cell with "
        "what a uniformly random ranking finds on the same events, min(k, d)/d; the 'random' "
        "detector's attributions are that reference in practice. A detector without an "
        f"attribution method shows '{NO_ATTRIBUTION}'.",
    ]
    if threshold == "oracle":
        notes.append(cautions.ORACLE)
    notes.append(cautions.NO_GUARANTEE)
    return Table(name, title, headers, tuple(rows), tuple(notes), data)


def _values(frame: pd.DataFrame, metric: str, threshold: str, variant: str) -> pd.Series:
    sel = frame[(frame["metric"] == metric) & (frame["threshold"] == threshold)
                & (frame["variant"] == variant)]  # fmt: skip
    return sel.set_index(["seed", "dataset", "entity"])["value"]


def _pooled_recall(clean: pd.DataFrame, kind: str, strategy: str, variant: str) -> float:
    """Detected events of ``kind`` over its events, summed over entities; mean over seeds."""
    recall = _values(clean, f"event_recall[{kind}]", strategy, variant).dropna()
    events = _values(clean, f"events[{kind}]", "none", variant).reindex(recall.index)
    if recall.empty:
        return math.nan
    seeds = recall.index.get_level_values("seed")
    detected = (recall * events).groupby(seeds).sum()
    return float((detected / events.groupby(seeds).sum()).mean())


def kind_table(metrics: pd.DataFrame) -> Table:
    """Event recall per incident kind, per realistic threshold strategy and detector (pooled
    over entities), marking kinds that no detector catches."""
    clean = _clean(metrics)
    name, title = "kinds", "Event recall per incident kind (realistic thresholds)"
    kinds = sorted({m.group(1) for m in map(_KIND.match, clean["metric"].unique()) if m})
    if not kinds:
        return Table(name, title, ("detector",), (), (
            "The data of this run gives no incident kinds for its events, so event recall "
            "per kind cannot be shown.",), pd.DataFrame())
    variants = _order_variants(sorted(clean["variant"].unique()))
    totals = {k: _pooled(clean, f"events[{k}]", "none") for k in kinds}
    counts = {k: float(t.max()) if len(t) else 0.0 for k, t in totals.items()}
    records, rows, notes = [], [], []
    for strategy in _strategies(clean, realistic=True):
        for v in variants:
            rec: dict = {"threshold": strategy, "variant": v}
            rec.update({k: _pooled_recall(clean, k, strategy, v) for k in kinds})
            records.append(rec)
        block = [r for r in records if r["threshold"] == strategy]
        missed = [k for k in kinds if all(not (r[k] > 0) for r in block)]
        if missed:
            notes.append(f"No detector catches any event of kind {', '.join(missed)} at "
                         f"threshold '{strategy}' (marked !).")
        for r in block:
            label = f"{r['variant']} (reference)" if r["variant"] == REFERENCE else r["variant"]
            rows.append((strategy, label, *(
                f"{Stat(r[k]).text()}{' !' if k in missed else ''}" for k in kinds)))
    data = pd.DataFrame.from_records(records)
    notes.insert(0, "Share of the events of each kind with at least one detected point, pooled "
                    "over entities (mean over seeds), clean data. Realistic thresholds only: "
                    "the oracle's would peek at the test labels.")
    notes.append(cautions.NO_GUARANTEE)
    headers = ("threshold", "detector", *(f"{k} ({counts[k]:.4g} events)" for k in kinds))
    return Table(name, title, headers, tuple(rows), tuple(notes), data)


def diagnosis_tables(metrics: pd.DataFrame, strategies: Sequence[str]) -> list[Table]:
    """The diagnosis table of each strategy in ``strategies``, then the per-kind table; data
    without culprits gets one diagnosis table (named ``diagnosis``) that says so."""
    tables = [diagnosis_table(metrics, s) for s in strategies]
    if tables and not tables[0].rows:
        first = tables[0]
        tables = [Table("diagnosis", "Diagnosis: culprit KPIs", first.headers, (), first.notes)]
    return [*tables, kind_table(metrics)]
