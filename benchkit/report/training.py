"""How the deep cells trained: a table of stop epochs and reasons, flags, and loss curves.

A detector that trains epoch by epoch stores a training record with its cell (see
``Detector.training_record``); ``Store.training_frame`` reads them back. Two flags point at a
training budget that may be wrong for the data (thresholds are common practice, no source):

* ``still falling``: the cell stopped at ``max_epochs`` while its last epoch was its best
  validation epoch, so more epochs might have helped;
* ``rose after best``: the last validation loss is above the minimum by more than
  :data:`RISE_FRACTION` of what the first epochs gained (first loss minus minimum), so the
  model was drifting away from the validation data when it stopped.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from benchkit.report.tables import Stat, Table, _order_variants

RISE_FRACTION = 0.25
STILL_FALLING = "still falling"
ROSE_AFTER_BEST = "rose after best"
LISTED_FLAGS = 20  # flagged cells named in the table's notes; the data frame holds them all


def training_flags(record: dict) -> list[str]:
    """The flags of one training record (see the module docstring); empty when none apply."""
    val = np.asarray(record.get("validation_loss", []), dtype=np.float64)
    if val.size == 0 or not np.isfinite(val).all():
        return []
    flags = []
    best = int(np.argmin(val))
    if record.get("stop_reason") == "max_epochs" and best == val.size - 1 and val.size > 1:
        flags.append(STILL_FALLING)
    gained = val[0] - val[best]
    if gained > 0 and val[-1] - val[best] > RISE_FRACTION * gained:
        flags.append(ROSE_AFTER_BEST)
    return flags


def training_summary(frame: pd.DataFrame) -> pd.DataFrame:
    """One row per cell of ``Store.training_frame()``: epochs, stop, losses and flags."""
    cols = ["variant", "dataset", "entity", "seed", "perturbation", "epochs", "best_epoch",
            "stop_reason", "windows_per_epoch", "final_validation_loss", "min_validation_loss",
            "flags"]  # fmt: skip
    rows = []
    for rec in frame.itertuples(index=False):
        r = rec.record
        val = np.asarray(r.get("validation_loss", []), dtype=np.float64)
        rows.append((rec.variant, rec.dataset, rec.entity, int(rec.seed), rec.perturbation,
                     len(val), int(r.get("best_epoch", -1)), r.get("stop_reason", ""),
                     int(r.get("windows_per_epoch", 0)),
                     float(val[-1]) if val.size else np.nan,
                     float(np.nanmin(val)) if val.size and np.isfinite(val).any() else np.nan,
                     ", ".join(training_flags(r))))  # fmt: skip
    return pd.DataFrame(rows, columns=cols)


def training_table(frame: pd.DataFrame) -> Table:
    """Per variant: cells with a record, epochs run, stop reasons and flagged cells."""
    summary = training_summary(frame)
    title = "How the deep cells trained"
    headers = ("detector", "cells", "epochs run (median, min–max)", "stopped by patience",
               "stopped at max_epochs", STILL_FALLING, ROSE_AFTER_BEST)  # fmt: skip
    if summary.empty:
        return Table("training", title, headers, (),
                     ("No cell of this run trained epoch by epoch (no training record).",),
                     summary)  # fmt: skip
    rows = []
    for variant in _order_variants(sorted(summary["variant"].unique())):
        part = summary[summary["variant"] == variant]
        epochs = part["epochs"]
        rows.append((variant, len(part),
                     f"{epochs.median():g} ({epochs.min()}–{epochs.max()})",
                     int((part["stop_reason"] == "patience").sum()),
                     int((part["stop_reason"] == "max_epochs").sum()),
                     int(part["flags"].str.contains(STILL_FALLING).sum()),
                     int(part["flags"].str.contains(ROSE_AFTER_BEST).sum())))  # fmt: skip
    flagged = summary[summary["flags"] != ""]
    notes = [
        "Losses are mean negative ELBO per window (beta = 1); the weights of the best validation "
        "epoch are kept. 'still falling': stopped at max_epochs while the last epoch was the "
        "best, so validation loss might have fallen further; that measures the fit to "
        "train-like data, not detection (the README's budget study found more training "
        "lowered F1 on public server machines). 'rose after best': the last validation loss is "
        f"above its minimum by more than {RISE_FRACTION:g} of what training had gained, so "
        "longer training was drifting away from the validation data. The loss curves are in "
        "the training-loss plot.",
    ]
    for rec in flagged.head(LISTED_FLAGS).itertuples(index=False):
        notes.append(f"Flagged: {rec.variant} on {rec.dataset}/{rec.entity}, seed {rec.seed}, "
                     f"perturbation {rec.perturbation}: {rec.flags} (stopped at epoch "
                     f"{rec.epochs - 1}, {rec.stop_reason}; final validation loss "
                     f"{Stat(rec.final_validation_loss).text()}, minimum "
                     f"{Stat(rec.min_validation_loss).text()}).")  # fmt: skip
    if len(flagged) > LISTED_FLAGS:
        notes.append(f"... and {len(flagged) - LISTED_FLAGS} more flagged cells (see export).")
    return Table("training", title, headers, tuple(rows), tuple(notes), summary)


def training_epochs(frame: pd.DataFrame) -> pd.DataFrame:
    """Every training record of ``Store.training_frame()`` as one row per cell and epoch.

    Columns ``cell_key, variant, detector, dataset, entity, seed, perturbation, epoch,
    train_loss, validation_loss, best_epoch, stop_epoch, stop_reason, flags`` (the last four
    repeat on each row of a cell); what ``benchkit export`` writes as ``training.<ext>``.
    """
    cols = ["cell_key", "variant", "detector", "dataset", "entity", "seed", "perturbation",
            "epoch", "train_loss", "validation_loss", "best_epoch", "stop_epoch", "stop_reason",
            "flags"]  # fmt: skip
    rows = []
    for rec in frame.itertuples(index=False):
        r = rec.record
        head = (rec.cell_key, rec.variant, rec.detector, rec.dataset, rec.entity, int(rec.seed),
                rec.perturbation)  # fmt: skip
        tail = (int(r.get("best_epoch", -1)), int(r.get("stop_epoch", -1)),
                r.get("stop_reason", ""), ", ".join(training_flags(r)))  # fmt: skip
        pairs = zip(r.get("train_loss", []), r.get("validation_loss", []), strict=False)
        rows.extend((*head, epoch, float(tr), float(va), *tail)
                    for epoch, (tr, va) in enumerate(pairs))  # fmt: skip
    return pd.DataFrame(rows, columns=cols).astype({"seed": "int64", "epoch": "int64"})


def training_curves(frame: pd.DataFrame, perturbation: str = "none") -> pd.DataFrame:
    """:func:`training_epochs` of the cells under ``perturbation`` (default: the clean run)."""
    epochs = training_epochs(frame)
    return epochs[epochs["perturbation"] == perturbation].reset_index(drop=True)
