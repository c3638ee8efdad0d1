"""Alerts: what an operator receives from a thresholded detector, counted true or false.

An *alert* is a maximal run of predicted points; runs separated by at most ``merge_gap``
unpredicted steps merge into one alert. An alert spans from its first to its last predicted step
and is *true* when that span overlaps a labelled event, *false* otherwise. (With ``merge_gap = 0``
the span is the run itself; with a larger gap, an alert whose runs straddle a short event is true.)

:func:`alert_curve` gives, for every distinct threshold at once, the event recall and the number of
false alerts, from one sort of the scores into *levels* (level ``k`` predicts the steps whose
level is ``<= k``). The counting rests on three facts:

- step ``t`` starts an alert exactly at the levels ``level[t] <= k < min(level[t - gap - 1 ..
  t - 1])`` (predicted, and none of the ``gap + 1`` steps before it is);
- an alert that starts on a labelled step is true; one that starts in the normal stretch before
  an event is true exactly when it runs into that event, and at most one alert per stretch can;
- that alert exists over one interval of levels: from the lowest level at which a predicted step
  of the stretch is joined to the event, up to the level at which no window of ``gap + 1``
  unpredicted steps meets the stretch any more (the alert then began before the stretch).

So false alerts = alert starts on unlabelled steps minus one per stretch over its interval, and
cumulative counts over the levels give them at every threshold in O(n log n).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from benchkit.metrics.event_level import delays_of
from benchkit.metrics.events import runs_of, segment_sums
from benchkit.metrics.inputs import MetricInputError, binary_pair, scores_and_labels

SECONDS_PER_DAY = 86_400.0
STEPS_PER_RATE = 1_000
"""Where the step length is unknown, false alerts are counted per this many test steps."""


class AlertCurve(NamedTuple):
    """Event recall and false alerts at every distinct finite threshold (descending)."""

    thresholds: np.ndarray
    event_recall: np.ndarray
    false_alerts: np.ndarray


def check_merge_gap(merge_gap: object, name: str = "merge_gap") -> int:
    """Return ``merge_gap`` as an int >= 0, or raise naming ``name``."""
    if isinstance(merge_gap, bool) or not isinstance(merge_gap, (int, np.integer)) or (
        merge_gap < 0
    ):
        raise MetricInputError(f"{name}: expected an integer >= 0, got {merge_gap!r}")
    return int(merge_gap)


def alert_spans(pred: np.ndarray, merge_gap: int) -> np.ndarray:
    """Inclusive ``[first, last]`` predicted steps of each alert, as an ``(m, 2)`` int64 array."""
    runs = runs_of(pred)
    if len(runs) < 2:
        return runs
    gaps = runs[1:, 0] - runs[:-1, 1] - 1
    opens = np.concatenate(([True], gaps > merge_gap))
    closes = np.concatenate((opens[1:], [True]))
    return np.column_stack([runs[opens, 0], runs[closes, 1]])


def _span_hits(spans: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Labelled steps inside each span."""
    return segment_sums(labels, spans[:, 0], spans[:, 1] + 1)


def count_alerts(pred: object, labels: object, merge_gap: int = 0) -> tuple[int, int]:
    """Numbers of true and false alerts of a 0/1 prediction.

    Parameters
    ----------
    pred, labels : 1-D 0/1 arrays of the same length.
    merge_gap : runs of predicted points separated by at most this many unpredicted steps are
        one alert.

    Returns
    -------
    (true_alerts, false_alerts): alerts whose span overlaps a labelled event, and the others.
    """
    p, y = binary_pair(pred, labels)
    spans = alert_spans(p, check_merge_gap(merge_gap))
    true = int(np.count_nonzero(_span_hits(spans, y)))
    return true, len(spans) - true


# ------------------------------------------------------------------------------ the curve


def dense_levels(scores: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Distinct finite scores descending, and each step's level: the index of its score there.

    ``-inf`` gets the level ``len(thresholds)`` (never predicted). See :func:`_levels`.
    """
    thresholds, level, _ = _levels(scores)
    return thresholds, level


def _levels(scores: np.ndarray) -> tuple[np.ndarray, np.ndarray, bool]:
    """:func:`dense_levels`, and whether all scores are distinct (every level used once).

    ``-inf`` gets the level ``len(thresholds)`` (never predicted). One sort of int64 words, each
    the score's order-preserving key (its IEEE 754 bits, negatives reflected, -0.0 as 0.0) with
    the lowest bits replaced by the step's index, gives the permutation. Neighbours in that order
    whose upper parts agree (ties, or scores differing only in the replaced bits) are the only
    ones whose scores are read back: runs of them that hold different scores are put in order,
    and equal scores share a level. The thresholds are then written through the levels.
    """
    n = len(scores)
    width = max(int(n - 1).bit_length(), 1)
    low_bits = np.int64((1 << width) - 1)
    if n and (scores == 0.0).any():
        scores = scores + 0.0  # -0.0 becomes 0.0: the two are one score with one key
    bits = scores.view(np.int64)
    words = np.right_shift(bits, 63)
    words &= np.int64(0x7FFF_FFFF_FFFF_FFFF)
    words ^= bits  # negatives reflected: the int64 order is the float order
    words &= ~low_bits
    index = np.arange(n, dtype=np.int64)
    words |= index
    words.sort()
    level = np.empty(n, dtype=np.int64)  # first a scratch buffer, filled at the end
    np.bitwise_xor(words[1:], words[:-1], out=level[1:])
    level[1:] &= ~low_bits  # 0 where neighbours share the upper part
    pairs = np.flatnonzero(level[1:] == 0)  # pair (i, i + 1) for each i in pairs
    words &= low_bits  # now the permutation
    unique = True
    if len(pairs) == 0:  # all scores distinct: the rank is the position
        count = n
        np.subtract(n - 1, index, out=index)
        level[words] = index
    else:
        left, right = scores[words[pairs]], scores[words[pairs + 1]]
        clash = pairs[left != right]
        if len(clash):  # runs of one upper part holding different scores: order them by score
            _sort_runs(words, scores, pairs, clash)
            left, right = scores[words[pairs]], scores[words[pairs + 1]]
        ties = pairs[left == right] + 1  # positions holding the same score as the one before
        if len(ties) == 0:
            count = n
            np.subtract(n - 1, index, out=index)
        else:
            unique = False
            distinct = np.ones(n, dtype=bool)
            distinct[ties] = False
            rank = np.cumsum(distinct, dtype=np.int64, out=index)  # 1-based, ascending
            count = int(rank[-1])
            np.subtract(count, rank, out=rank)
        level[words] = index
    thresholds = np.empty(count, dtype=np.float64)
    thresholds[level] = scores
    if count and thresholds[-1] == -np.inf:
        thresholds = thresholds[:-1]  # its level is the number of finite values: never predicted
    return thresholds, level, unique


def _sort_runs(order: np.ndarray, scores: np.ndarray, pairs: np.ndarray, clash: np.ndarray):
    """Sort by score each run of ``order`` chained by ``pairs`` (neighbours sharing the upper
    part of their words) that holds a clashing pair (different scores)."""
    linked = np.zeros(len(order) + 1, dtype=np.int8)
    linked[pairs + 1] = 1  # pair (i, i + 1) joins i + 1 to i
    edges = np.flatnonzero(np.diff(linked))  # runs of joined elements [start, stop)
    starts, stops = edges[::2], edges[1::2] + 1
    keep = np.searchsorted(stops, clash, side="right")
    starts, stops = starts[np.unique(keep)], stops[np.unique(keep)]
    sizes = stops - starts
    where = np.repeat(starts - np.concatenate(([0], np.cumsum(sizes)[:-1])), sizes)
    where += np.arange(len(where))
    owner = np.repeat(np.arange(len(starts)), sizes)
    fix = np.lexsort((scores[order[where]], owner))
    order[where] = order[where][fix]


def window_min(values: np.ndarray, width: int, pad: int, reduce=np.minimum) -> np.ndarray:
    """``out[i] = min(values[i : i + width])``, positions past the end counting as ``pad``.

    Doubling: minima over windows of 1, 2, 4, ... steps from shifted slices, then two
    overlapping power-of-two windows cover any width (O(n log width)). ``reduce=np.maximum``
    gives window maxima.
    """
    n = len(values)
    out = values.copy()
    if width <= 1 or n == 0:
        return out
    current = np.concatenate((values, np.full(width, pad, dtype=values.dtype)))
    span = 1
    while span * 2 <= width:
        current[: len(current) - span] = reduce(current[:-span], current[span:])
        current[len(current) - span :] = pad
        span *= 2
    reduce(current[:n], current[width - span : width - span + n], out=out)
    return out


def _last_alert_levels(level, windows, events, gap, top) -> tuple[np.ndarray, np.ndarray]:
    """Per normal stretch before each event: the levels ``[first, bridged)`` at which one alert
    that starts in the stretch runs into the event (so it is true although it starts there).

    ``windows[i]`` is the lowest level among steps ``i - gap - 1 .. i - 1``: the window of
    ``gap + 1`` steps that starts at ``i - gap - 1`` is unpredicted exactly at the levels below
    it. For the stretch ``[a, e - 1]`` before the event that starts at ``e``: ``first`` is the
    lowest level at which a predicted step ``p`` of the stretch is joined to the event (no
    unpredicted window starts in ``(p, e]``); from ``bridged`` on, no unpredicted window meets
    ``[a - 1, e]``, so that alert began before the stretch.
    """
    e = events[:, 0]
    a = np.concatenate(([0], events[:-1, 1] + 1))
    shift = gap + 1
    first = np.empty(len(e), dtype=np.int64)
    near = np.empty(len(e), dtype=np.int64)
    back = np.arange(1, shift + 1)
    chunk = max(1, 4_000_000 // shift)
    for lo in range(0, len(e), chunk):  # chunks of events keep the (events, gap + 1) grid small
        ends, begins = e[lo : lo + chunk, None], a[lo : lo + chunk, None]
        p = ends - back
        joined = np.maximum.accumulate(windows[p + 1 + shift], axis=1)
        own = np.where(p >= begins, level[np.maximum(p, 0)], top)
        first[lo : lo + chunk] = np.maximum(own, joined).min(axis=1)
        near[lo : lo + chunk] = windows[begins + back - 1].max(axis=1)
    inside = np.maximum.reduceat(windows, _bounds(a + shift, e + 1 + shift, len(windows)))[::2]
    reach = np.maximum(near, inside)
    bridged = np.where(a > 0, reach, top)
    return first, np.maximum(first, bridged)


def _bounds(starts: np.ndarray, stops: np.ndarray, n: int) -> np.ndarray:
    """reduceat indices over an array of length ``n`` for ordered, disjoint, non-empty
    ``[start, stop)`` segments; take every second result."""
    bounds = np.column_stack([starts, stops]).ravel()
    return bounds[:-1] if bounds[-1] == n else bounds


def alert_curve(scores: object, labels: object, merge_gap: int = 0) -> AlertCurve:
    """Event recall and false alerts at every distinct finite threshold, exactly.

    Parameters
    ----------
    scores : 1-D scores, higher = more anomalous; ``-inf`` allowed (never predicted).
    labels : 1-D 0/1 labels of the same length.
    merge_gap : as in :func:`count_alerts`.

    Returns
    -------
    AlertCurve(thresholds, event_recall, false_alerts): thresholds are the distinct finite
    scores, descending; point ``i`` is evaluated at ``scores >= thresholds[i]``. Event recall is
    the share of labelled events with a predicted point (0.0 without events). O(n log n).
    """
    s, y = scores_and_labels(scores, labels)
    gap = check_merge_gap(merge_gap)
    thresholds, level, unique = _levels(s)
    top = len(thresholds)
    if top == 0:
        return AlertCurve(thresholds, np.empty(0), np.empty(0, dtype=np.int64))
    events = runs_of(y)
    # windows[i]: lowest level among steps i - gap - 1 .. i - 1 (top outside the series).
    shift = gap + 1
    if gap == 0:
        windows = np.empty(len(level) + 1, dtype=np.int64)
        windows[0], windows[1:] = top, level
    else:
        windows = window_min(np.concatenate((np.full(shift, top), level)), shift, top)
    before = windows[: len(level)]
    # An unlabelled step t starts an alert at the levels level[t] <= k < before[t]; each such
    # alert is false unless it is the one that runs into the next event.
    candidate = level < before
    np.greater(candidate, y, out=candidate)  # and unlabelled
    starts = np.flatnonzero(candidate)
    if unique and gap == 0:  # each level, and each step before a start, is met once
        change = np.zeros(top + 1, dtype=np.int64)
        change[level[starts]] = 1
        change[before[starts]] -= 1  # only "top" can repeat, and it is dropped below
    else:
        change = np.bincount(level[starts], minlength=top + 1)
        change -= np.bincount(before[starts], minlength=top + 1)
    if len(events) == 0:
        return AlertCurve(thresholds, np.zeros(top), np.cumsum(change, out=change)[:top])
    first, bridged = _last_alert_levels(level, windows, events, gap, top)
    np.subtract.at(change, first, 1)
    np.add.at(change, bridged, 1)
    detected = np.minimum.reduceat(level, _bounds(events[:, 0], events[:, 1] + 1, len(level)))[::2]
    # event recall steps up at each event's detection level: written run by run, not summed
    found, at = np.unique(np.minimum(detected, top), return_counts=True)
    steps = np.diff(np.concatenate((found, [top])))
    recall = np.repeat(np.cumsum(at) / len(events), steps)
    recall = np.concatenate((np.zeros(found[0]), recall)) if found[0] > 0 else recall
    return AlertCurve(thresholds, recall[:top], np.cumsum(change, out=change)[:top])


# ------------------------------------------------------------------ what the operator sees

ALERT_METRICS = (
    "true_alerts",
    "false_alerts",
    "false_alerts_per_day",
    "false_alerts_per_1k_steps",
    "ttd_median_steps",
    "ttd_p90_steps",
    "ttd_median_minutes",
    "ttd_p90_minutes",
    "alerts_per_detected_event",
)
"""Keys of :func:`alert_metrics`, in report order."""


def duration(n_steps: int, step_seconds: float | None, per: str = "day") -> float:
    """Length of ``n_steps`` steps in days (``per="day"``, needs ``step_seconds``; NaN without
    it) or in thousands of steps (``per="1000-steps"``)."""
    if per == "1000-steps":
        return n_steps / STEPS_PER_RATE
    if step_seconds is None or not np.isfinite(step_seconds):
        return float("nan")
    return n_steps * float(step_seconds) / SECONDS_PER_DAY


def _per_event_alerts(spans: np.ndarray, events: np.ndarray) -> np.ndarray:
    """Number of alert spans overlapping each event."""
    if len(spans) == 0:
        return np.zeros(len(events), dtype=np.int64)
    after_start = np.searchsorted(spans[:, 1], events[:, 0], side="left")
    before_end = np.searchsorted(spans[:, 0], events[:, 1], side="right")
    return before_end - after_start


def alert_metrics(
    pred: object, labels: object, merge_gap: int = 0, step_seconds: float | None = None
) -> dict[str, float]:
    """The operator's numbers for one 0/1 prediction (keys in :data:`ALERT_METRICS`).

    Parameters
    ----------
    pred, labels : 1-D 0/1 arrays of the same length (the test part).
    merge_gap : as in :func:`count_alerts`.
    step_seconds : length of one step; without it the per-day rate and the times in minutes
        are NaN and ``false_alerts_per_1k_steps`` is the rate to read.

    Returns
    -------
    true and false alert counts; false alerts per day and per 1,000 steps; median and 90th
    percentile (linear interpolation) of the time to detect over detected events (first
    predicted step minus the event's first step), in steps and minutes, NaN when nothing is
    detected; alerts per detected event (alerts overlapping each event that at least one alert
    overlaps, averaged: above 1 means fragmented alerting).
    """
    p, y = binary_pair(pred, labels)
    gap = check_merge_gap(merge_gap)
    spans = alert_spans(p, gap)
    events = runs_of(y)
    true = int(np.count_nonzero(_span_hits(spans, y)))
    false = len(spans) - true
    delays = delays_of(p, events).astype(np.float64)
    if len(delays):
        median, p90 = float(np.median(delays)), float(np.percentile(delays, 90))
    else:
        median = p90 = float("nan")
    minutes = float(step_seconds) / 60.0 if step_seconds is not None else float("nan")
    touching = _per_event_alerts(spans, events)
    touched = int(np.count_nonzero(touching))
    days = duration(len(y), step_seconds)
    return {
        "true_alerts": float(true),
        "false_alerts": float(false),
        "false_alerts_per_day": false / days if days > 0 else float("nan"),
        "false_alerts_per_1k_steps": false / duration(len(y), None, "1000-steps")
        if len(y) else float("nan"),
        "ttd_median_steps": median,
        "ttd_p90_steps": p90,
        "ttd_median_minutes": median * minutes,
        "ttd_p90_minutes": p90 * minutes,
        "alerts_per_detected_event": float(touching.sum() / touched) if touched else float("nan"),
    }


def highest_within(false_alerts: np.ndarray, allowed: float) -> int:
    """Index of the lowest threshold (thresholds descending) such that it and every higher
    threshold give at most ``allowed`` false alerts; -1 when even the highest gives more."""
    over = np.flatnonzero(false_alerts > allowed)
    return len(false_alerts) - 1 if len(over) == 0 else int(over[0]) - 1


def best_recall_within(curve: AlertCurve, allowed: float) -> float:
    """The threshold of highest event recall among those with at most ``allowed`` false alerts
    (ties: the highest threshold); just above the highest score when none qualifies."""
    ok = np.flatnonzero(curve.false_alerts <= allowed)
    if len(ok) == 0:
        return float(np.nextafter(curve.thresholds[0], np.inf)) if len(curve.thresholds) else (
            float("inf")
        )
    return float(curve.thresholds[ok[int(np.argmax(curve.event_recall[ok]))]])
