"""Per-entity summary of a dataset (``benchkit datasets show``)."""

from __future__ import annotations

import numpy as np
from tabulate import tabulate

from benchkit.data.events import event_lengths
from benchkit.data.model import Dataset

COLUMNS = (
    "entity",
    "train",
    "test",
    "channels",
    "anomaly %",
    "events",
    "event len min",
    "median",
    "max",
)


def summary_rows(dataset: Dataset) -> list[dict]:
    """One dict per entity, plus a final ``all`` row over every entity.

    Keys: ``entity``, ``train``, ``test`` (lengths), ``channels``, ``anomaly %`` (share of
    labelled test steps), ``events`` (maximal labelled runs), ``event len min``, ``median``,
    ``max`` (steps; ``None`` without events).
    """
    rows = []
    all_lengths, all_labels = [], []
    for e in dataset.entities:
        lengths = event_lengths(e.labels)
        all_lengths.append(lengths)
        all_labels.append(np.asarray(e.labels))
        rows.append(
            _row(e.name, e.train.shape[0], e.test.shape[0], e.n_channels, e.labels, lengths)
        )
    if len(rows) > 1:
        labels = np.concatenate(all_labels)
        lengths = np.concatenate(all_lengths)
        train = sum(r["train"] for r in rows)
        rows.append(_row("all", train, labels.size, rows[0]["channels"], labels, lengths))
    return rows


def _row(name: str, n_train: int, n_test: int, d: int, labels, lengths: np.ndarray) -> dict:
    has = lengths.size > 0
    return {
        "entity": name,
        "train": int(n_train),
        "test": int(n_test),
        "channels": int(d),
        "anomaly %": 100.0 * float(np.mean(labels)) if n_test else 0.0,
        "events": int(lengths.size),
        "event len min": int(lengths.min()) if has else None,
        "median": float(np.median(lengths)) if has else None,
        "max": int(lengths.max()) if has else None,
    }


def summary_table(dataset: Dataset) -> str:
    """The summary as a plain-text table, headed by the dataset name and fingerprint."""
    rows = [[r[c] for c in COLUMNS] for r in summary_rows(dataset)]
    formats = tuple(".2f" if c == "anomaly %" else ".1f" if c == "median" else "g" for c in COLUMNS)
    body = tabulate(rows, headers=COLUMNS, floatfmt=formats, missingval="-")
    head = (
        f"dataset {dataset.name}  source {dataset.source}  fingerprint {dataset.fingerprint()[:16]}"
    )
    return f"{head}\n{body}"
