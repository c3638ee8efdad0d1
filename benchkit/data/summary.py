"""Per-entity summary of a dataset (``benchkit datasets show``)."""

from __future__ import annotations

from collections import Counter

import numpy as np
from tabulate import tabulate

from benchkit.data.events import event_lengths
from benchkit.data.model import Dataset, Entity
from benchkit.data.step import describe_step

COLUMNS = (
    "entity",
    "train",
    "test",
    "channels",
    "step",
    "anomaly %",
    "events",
    "event len min",
    "median",
    "max",
    "with culprits",
    "median culprits",
)


def summary_rows(dataset: Dataset) -> list[dict]:
    """One dict per entity, plus a final ``all`` row over every entity.

    Keys: ``entity``, ``train``, ``test`` (lengths), ``channels``, ``step`` (``"5min"``, or
    ``"-"`` when unknown), ``anomaly %`` (share of labelled test steps), ``events`` (maximal
    labelled runs), ``event len min``, ``median``, ``max`` (steps; ``None`` without events),
    ``with culprits`` (events whose culprit KPIs are known), ``median culprits`` (culprit KPIs
    per such event; ``None`` without any).
    """
    rows = []
    for e in dataset.entities:
        rows.append(_row(e.name, e.train.shape[0], e.test.shape[0], e.n_channels, e.labels, [e]))
    if len(rows) > 1:
        labels = np.concatenate([np.asarray(e.labels) for e in dataset.entities])
        train = sum(r["train"] for r in rows)
        rows.append(_row("all", train, labels.size, rows[0]["channels"], labels, dataset.entities))
    return rows


def _row(name: str, n_train: int, n_test: int, d: int, labels, entities: list[Entity]) -> dict:
    lengths = np.concatenate([event_lengths(e.labels) for e in entities])
    culprits = [len(ev.culprits) for e in entities for ev in e.events if ev.culprits is not None]
    steps = {e.step_seconds for e in entities}
    has = lengths.size > 0
    return {
        "entity": name,
        "train": int(n_train),
        "test": int(n_test),
        "channels": int(d),
        "step": describe_step(steps.pop()) if len(steps) == 1 else "mixed",
        "anomaly %": 100.0 * float(np.mean(labels)) if n_test else 0.0,
        "events": int(lengths.size),
        "event len min": int(lengths.min()) if has else None,
        "median": float(np.median(lengths)) if has else None,
        "max": int(lengths.max()) if has else None,
        "with culprits": len(culprits),
        "median culprits": float(np.median(culprits)) if culprits else None,
    }


def kind_counts(dataset: Dataset) -> dict[str, Counter]:
    """Entity name -> events per kind (events without a kind are not counted)."""
    return {
        e.name: Counter(ev.kind for ev in e.events if ev.kind is not None) for e in dataset.entities
    }


def kinds_table(dataset: Dataset) -> str | None:
    """Events per kind, one row per entity plus ``all``; ``None`` when no event has a kind."""
    counts = kind_counts(dataset)
    total = sum(counts.values(), Counter())
    if not total:
        return None
    kinds = sorted(total)
    rows = [[name, *(c[k] for k in kinds)] for name, c in counts.items()]
    if len(rows) > 1:
        rows.append(["all", *(total[k] for k in kinds)])
    return tabulate(rows, headers=("events by kind", *kinds))


def summary_table(dataset: Dataset) -> str:
    """The summary as a plain-text table, headed by the dataset name and fingerprint; a second
    table counts events by kind when the data names kinds."""
    rows = [[r[c] for c in COLUMNS] for r in summary_rows(dataset)]
    formats = tuple(
        ".2f" if c == "anomaly %" else ".1f" if c in ("median", "median culprits") else "g"
        for c in COLUMNS
    )
    body = tabulate(rows, headers=COLUMNS, floatfmt=formats, missingval="-")
    head = (
        f"dataset {dataset.name}  source {dataset.source}  fingerprint {dataset.fingerprint()[:16]}"
    )
    kinds = kinds_table(dataset)
    return f"{head}\n{body}" + (f"\n\n{kinds}" if kinds else "")
