"""Event-level metrics: event recall, composite F1 (Garg et al., TNNLS 2021), detection delay."""

from __future__ import annotations

import numpy as np

from benchkit.metrics.events import runs_of, segment_sums
from benchkit.metrics.inputs import binary_pair
from benchkit.metrics.pointwise import confusion, harmonic_mean, ratio


def _hits(pred: np.ndarray, labels: np.ndarray) -> np.ndarray:
    events = runs_of(labels)
    return segment_sums(pred, events[:, 0], events[:, 1] + 1)


def event_recall(pred: object, labels: object) -> float:
    """Share of labelled events with at least one predicted point (0.0 when there are none)."""
    p, y = binary_pair(pred, labels)
    hits = _hits(p, y)
    return float(ratio(np.count_nonzero(hits), len(hits)))


def composite_f1(pred: object, labels: object) -> float:
    """Harmonic mean of point-wise precision and event recall (Garg et al., 2021)."""
    p, y = binary_pair(pred, labels)
    tp, fp, _ = confusion(p, y)
    hits = _hits(p, y)
    precision = ratio(tp, tp + fp)
    recall = ratio(np.count_nonzero(hits), len(hits))
    return float(harmonic_mean(precision, recall))


def delays_of(pred: np.ndarray, events: np.ndarray) -> np.ndarray:
    """Steps from each detected event's start to its first predicted point (validated inputs)."""
    predicted = np.flatnonzero(pred)
    if len(predicted) == 0:
        return np.empty(0, dtype=np.int64)
    after = np.searchsorted(predicted, events[:, 0])
    first = predicted[np.minimum(after, len(predicted) - 1)]
    detected = (after < len(predicted)) & (first <= events[:, 1])
    return (first - events[:, 0])[detected]


def detection_delays(pred: object, labels: object) -> tuple[float, float]:
    """Mean and median detection delay, in steps, over the detected events.

    A delay of 0 means the event's first point is predicted. Both are NaN when no event is
    detected (including when there are no events).
    """
    p, y = binary_pair(pred, labels)
    delays = delays_of(p, runs_of(y))
    if len(delays) == 0:
        return float("nan"), float("nan")
    return float(np.mean(delays)), float(np.median(delays))
