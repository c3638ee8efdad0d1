"""Adjusted predictions: point adjustment, PA%K and delay-bounded adjustment, and the PA%K curve.

Point adjustment (Xu et al., WWW 2018): an event with at least one predicted point counts as
wholly predicted. PA%K (Kim et al., AAAI 2022): only when the share of its predicted points is
strictly above K percent. Delay-bounded: only when a point among the event's first ``delay + 1``
points (detection delay at most ``delay`` steps) is predicted; otherwise none of the event's points
count, not even later ones.
"""

from __future__ import annotations

import numpy as np

from benchkit.metrics.events import cover, lengths, runs_of, segment_sums
from benchkit.metrics.inputs import MetricInputError, binary_pair, check_delay, check_percent
from benchkit.metrics.pointwise import f1_from_counts

DEFAULT_KS = np.arange(101)


def pak_passes(hits: np.ndarray, sizes: np.ndarray, k: float) -> np.ndarray:
    """True where an event with ``hits`` of ``sizes`` points predicted is adjusted under PA%K."""
    return hits * 100.0 > k * sizes


def pak_needed(sizes: np.ndarray, k: float) -> np.ndarray:
    """Smallest number of predicted points that adjusts each event under PA%K (``size + 1``: never).

    The same test as :func:`pak_passes`, so the two always agree.
    """
    need = np.clip(np.floor(k * sizes / 100.0).astype(np.int64) + 1, 1, sizes + 1)
    need = np.where((need > 1) & pak_passes(need - 1, sizes, k), need - 1, need)
    return np.where((need <= sizes) & ~pak_passes(need, sizes, k), need + 1, need)


def delay_windows(events: np.ndarray, delay: int) -> tuple[np.ndarray, np.ndarray]:
    """Half-open ``[start, stop)`` of each event's first ``delay + 1`` points (within the event)."""
    return events[:, 0], np.minimum(events[:, 0] + delay + 1, events[:, 1] + 1)


def _adjusted(pred: np.ndarray, events: np.ndarray, adjusted: np.ndarray) -> np.ndarray:
    out = pred.copy()
    out |= cover(events[adjusted], len(pred))
    return out


def point_adjust(pred: object, labels: object) -> np.ndarray:
    """Point-adjusted prediction: every point of an event with any predicted point is predicted.

    Returns
    -------
    Bool array of the same length; points outside events are unchanged.
    """
    return pa_k_adjust(pred, labels, 0)


def pa_k_adjust(pred: object, labels: object, k: float) -> np.ndarray:
    """PA%K prediction: an event is wholly predicted when more than ``k`` % of it is predicted.

    ``k = 0`` is plain point adjustment, ``k = 100`` leaves the prediction point-wise.
    """
    p, y = binary_pair(pred, labels)
    k = check_percent(k)
    events = runs_of(y)
    hits = segment_sums(p, events[:, 0], events[:, 1] + 1)
    return _adjusted(p, events, pak_passes(hits, lengths(events), k))


def delay_adjust(pred: object, labels: object, delay: int) -> np.ndarray:
    """Delay-bounded prediction: an event detected at most ``delay`` steps after its start is
    wholly predicted; every point of any other event is set to not predicted.
    """
    p, y = binary_pair(pred, labels)
    delay = check_delay(delay)
    events = runs_of(y)
    starts, stops = delay_windows(events, delay)
    caught = segment_sums(p, starts, stops) > 0
    out = p & ~y
    out |= cover(events[caught], len(p))
    return out


def check_ks(ks: object) -> np.ndarray:
    """K values for a PA%K curve: at least two, increasing, within [0, 100]."""
    arr = DEFAULT_KS if ks is None else np.asarray(ks, dtype=np.float64)
    if arr.ndim != 1 or len(arr) < 2 or np.any(np.diff(arr) <= 0):
        raise MetricInputError("ks: expected at least two increasing values")
    if arr[0] < 0 or arr[-1] > 100:
        raise MetricInputError("ks: values must lie within 0 to 100")
    return arr.astype(np.float64)


def curve_mean(values: np.ndarray, ks: np.ndarray) -> float:
    """Trapezoid area under ``values`` over ``ks`` divided by the span of ``ks``."""
    area = float(np.sum((values[1:] + values[:-1]) * np.diff(ks)) / 2.0)
    return area / float(ks[-1] - ks[0])


def pa_k_f1_curve(pred: object, labels: object, ks: object = None) -> tuple[np.ndarray, np.ndarray]:
    """F1 of the PA%K prediction for each K.

    Returns
    -------
    (ks, f1) arrays; ``ks`` defaults to 0, 1, ..., 100.
    """
    p, y = binary_pair(pred, labels)
    ks = check_ks(ks)
    events = runs_of(y)
    sizes = lengths(events)
    hits = segment_sums(p, events[:, 0], events[:, 1] + 1)
    tp = int(hits.sum())
    fp = int(np.count_nonzero(p)) - tp
    positives = int(sizes.sum())
    # An event gains its undetected points for every K below its share 100·hits/size.
    share = hits * 100.0 / np.maximum(sizes, 1)
    order = np.argsort(share)
    gain_above = np.concatenate((np.cumsum((sizes - hits)[order][::-1])[::-1], [0]))
    first_passing = np.searchsorted(share[order], ks, side="right")
    tp_k = tp + gain_above[first_passing]
    return ks, f1_from_counts(tp_k, fp, positives - tp_k)


def pa_k_f1_auc(pred: object, labels: object, ks: object = None) -> float:
    """Area under F1 versus K (PA%K), divided by the K span: in [0, 1].

    With the default K = 0, 1, ..., 100 this is the area divided by 100 (Kim et al., AAAI 2022).
    """
    ks, f1 = pa_k_f1_curve(pred, labels, ks)
    return curve_mean(f1, ks)
