"""Best range-based F1 over quantile thresholds, all thresholds evaluated together.

Candidate thresholds are score quantiles (evenly spaced ranks of the sorted finite scores, plus
evenly spaced distinct values; every distinct value when there are at most ``n_thresholds``).
Lowering the threshold adds points in descending score order: recall changes only when points of
a real range join, so its per-range changes are accumulated over the levels; predicted ranges grow
and merge, so every range that ever exists is enumerated once with the levels where it lives
(:mod:`benchkit.metrics.run_tree`) and its precision term is added over those levels.
"""

from __future__ import annotations

import numpy as np

from benchkit.metrics.best import NO_BEST, BestF1
from benchkit.metrics.events import event_index, event_points, runs_of
from benchkit.metrics.inputs import MetricInputError, scores_and_labels
from benchkit.metrics.pointwise import harmonic_mean, ratio
from benchkit.metrics.positional import (
    cardinality_factor,
    overlap_reward,
    point_weights,
    prefix_sums,
)
from benchkit.metrics.range_based import check_range_options, overlap_counts
from benchkit.metrics.run_tree import range_lives


def _evenly(ordered: np.ndarray, count: int) -> np.ndarray:
    """``count`` evenly spaced entries (by rank) of an ascending array, ends included."""
    if len(ordered) == 0:
        return ordered
    return ordered[np.round(np.linspace(0, len(ordered) - 1, count)).astype(np.int64)]


def quantile_thresholds(
    scores: np.ndarray, labels: np.ndarray, n_thresholds: int, extra: np.ndarray
) -> np.ndarray:
    """Candidate thresholds, ascending: every distinct finite score when there are at most
    ``n_thresholds``, else the union of ``n_thresholds`` quantiles of all scores, of the distinct
    scores and of the labelled points' scores, plus the finite ``extra`` thresholds.
    """
    finite = np.isfinite(scores)
    ordered = np.sort(scores[finite])
    distinct = np.unique(ordered)
    if len(distinct) <= n_thresholds:
        return distinct
    on_labels = np.sort(scores[finite & labels])
    picks = [_evenly(ordered, n_thresholds), _evenly(distinct, n_thresholds)]
    picks += [_evenly(on_labels, n_thresholds), extra[np.isfinite(extra)]]
    return np.unique(np.concatenate(picks))


def _level_sum(levels: np.ndarray, weights: np.ndarray | None, top: int) -> np.ndarray:
    """Running total over levels 0..top-1 of weights (default 1 each) entering at ``levels``."""
    return np.cumsum(np.bincount(levels, weights=weights, minlength=top + 1)[:top])


def _running_within(values: np.ndarray, group_start: np.ndarray) -> np.ndarray:
    """Cumulative sum of ``values`` restarting at every True of ``group_start``."""
    total = np.cumsum(values)
    before = np.concatenate(([0], total[:-1]))
    start_at = np.maximum.accumulate(np.where(group_start, np.arange(len(values)), 0))
    return total - before[start_at]


def recall_by_level(level, events, alpha, cardinality, bias, top) -> np.ndarray:
    """Range recall at each level: per real range, its value after each level where it changes."""
    if len(events) == 0:
        return np.zeros(top)
    points = event_points(events)
    owner = event_index(events)
    inner = np.flatnonzero(owner[1:] == owner[:-1])  # adjacent pairs inside one range
    item_owner = np.concatenate((owner, owner[inner]))
    item_level = np.concatenate((level[points], np.maximum(level[points[inner]],
                                                           level[points[inner] + 1])))
    is_point = np.arange(len(item_owner)) < len(points)
    weight = np.concatenate((point_weights(events, bias), np.zeros(len(inner))))
    order = np.lexsort((item_level, item_owner))
    item_owner, item_level = item_owner[order], item_level[order]
    starts_range = np.concatenate(([True], item_owner[1:] != item_owner[:-1]))
    count = _running_within(is_point[order], starts_range)
    pairs = _running_within(~is_point[order], starts_range)
    reward = _running_within(weight[order], starts_range)
    # The state of a range after the last item of each of its levels.
    last = np.concatenate((starts_range[1:], [True]))
    last |= np.concatenate((item_level[1:] != item_level[:-1], [True]))
    value = alpha * (count[last] > 0)
    value = value + (1.0 - alpha) * reward[last] * cardinality_factor(
        count[last] - pairs[last], cardinality
    )
    previous = np.concatenate(([0.0], value[:-1]))
    previous[np.concatenate(([True], np.diff(item_owner[last]) != 0))] = 0.0
    change = value - previous
    return _level_sum(item_level[last], change, top) / len(events)


def precision_by_level(level, labels, events, cardinality, bias, top) -> np.ndarray:
    """Range precision at each level, from every predicted range's lifetime over the levels."""
    lives = range_lives(level, top)
    if len(lives.starts) == 0:
        return np.zeros(top)
    ranges = np.column_stack([lives.starts, lives.ends])
    count, index_sum = prefix_sums(labels)
    term = overlap_reward(count, index_sum, lives.starts, lives.ends, bias)
    term = term * cardinality_factor(overlap_counts(ranges, events), cardinality)
    alive = _level_sum(lives.born, None, top) - _level_sum(lives.dies, None, top)
    total = _level_sum(lives.born, term, top) - _level_sum(lives.dies, term, top)
    return ratio(total, alive)


def best_range_f1(
    scores: object,
    labels: object,
    alpha: float = 0.0,
    cardinality: str = "one",
    bias: str = "flat",
    n_thresholds: int = 512,
    *,
    extra_thresholds: object = (),
) -> BestF1:
    """Best range-based F1 (Tatbul et al., 2018) over quantile thresholds of ``scores``.

    Parameters
    ----------
    scores : 1-D scores (``-inf`` allowed, never predicted); labels : 0/1 of the same length.
    alpha, cardinality, bias : as in :func:`range_precision_recall`.
    n_thresholds : candidate quantiles (at least 512 by default); exact over all thresholds
        when the scores have at most this many distinct finite values.
    extra_thresholds : further candidates (e.g. other metrics' best thresholds).

    Returns
    -------
    BestF1(f1, precision, recall, threshold); ties go to the largest threshold; F1 = 0 everywhere
    gives ``NO_BEST`` (threshold +inf).
    """
    s, y = scores_and_labels(scores, labels)
    alpha = check_range_options(alpha, cardinality, bias)
    if isinstance(n_thresholds, bool) or not isinstance(n_thresholds, (int, np.integer)) or (
        n_thresholds < 2
    ):
        raise MetricInputError(f"n_thresholds: expected an integer >= 2, got {n_thresholds!r}")
    extra = np.asarray(extra_thresholds, dtype=np.float64).ravel()
    ascending = quantile_thresholds(s, y, int(n_thresholds), extra)
    top = len(ascending)
    if top == 0:
        return NO_BEST
    dtype = np.int16 if top < np.iinfo(np.int16).max else np.int32
    level = (top - np.searchsorted(ascending, s, side="right")).astype(dtype)
    events = runs_of(y)
    precision = precision_by_level(level, y, events, cardinality, bias, top)
    recall = recall_by_level(level, events, alpha, cardinality, bias, top)
    f1 = harmonic_mean(precision, recall)
    at = int(np.argmax(f1))
    if f1[at] <= 0.0:
        return NO_BEST
    threshold = float(ascending[top - 1 - at])
    return BestF1(float(f1[at]), float(precision[at]), float(recall[at]), threshold)
