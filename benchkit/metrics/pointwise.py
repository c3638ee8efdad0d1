"""Point-wise precision, recall and F1 (every ratio with a zero denominator is 0.0)."""

from __future__ import annotations

import numpy as np

from benchkit.metrics.inputs import binary_pair


def ratio(numerator: np.ndarray | float, denominator: np.ndarray | float) -> np.ndarray:
    """``numerator / denominator`` elementwise, 0.0 where the denominator is 0."""
    num = np.asarray(numerator, dtype=np.float64)
    den = np.asarray(denominator, dtype=np.float64)
    out = np.zeros(np.broadcast(num, den).shape)
    np.divide(num, den, out=out, where=den != 0)
    return out


def f1_from_counts(tp: np.ndarray, fp: np.ndarray, fn: np.ndarray) -> np.ndarray:
    """F1 = 2·TP / (2·TP + FP + FN), 0.0 when there is nothing to count."""
    tp = np.asarray(tp, dtype=np.float64)
    return ratio(2.0 * tp, 2.0 * tp + fp + fn)


def harmonic_mean(precision: np.ndarray | float, recall: np.ndarray | float) -> np.ndarray:
    """F1 = 2PR / (P + R), 0.0 when both are 0."""
    p = np.asarray(precision, dtype=np.float64)
    r = np.asarray(recall, dtype=np.float64)
    return ratio(2.0 * p * r, p + r)


def counts_to_prf(tp: int, fp: int, fn: int) -> tuple[float, float, float]:
    """(precision, recall, f1) from confusion counts."""
    return (
        float(ratio(tp, tp + fp)),
        float(ratio(tp, tp + fn)),
        float(f1_from_counts(tp, fp, fn)),
    )


def confusion(pred: np.ndarray, labels: np.ndarray) -> tuple[int, int, int]:
    """(TP, FP, FN) of two validated bool arrays."""
    tp = int(np.count_nonzero(pred & labels))
    predicted = int(np.count_nonzero(pred))
    positive = int(np.count_nonzero(labels))
    return tp, predicted - tp, positive - tp


def prf(pred: object, labels: object) -> tuple[float, float, float]:
    """Point-wise precision, recall and F1 of a 0/1 prediction.

    Parameters
    ----------
    pred, labels : 1-D arrays of 0/1 of the same length.

    Returns
    -------
    (precision, recall, f1); a ratio whose denominator is 0 is 0.0 (no predictions: precision 0;
    no labelled points: recall 0).
    """
    p, y = binary_pair(pred, labels)
    return counts_to_prf(*confusion(p, y))
