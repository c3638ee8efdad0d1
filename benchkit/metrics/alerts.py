"""Alerts: what an operator receives from a thresholded detector, counted true or false.

An *alert* is a maximal run of predicted points; runs separated by at most ``merge_gap``
unpredicted steps merge into one alert. An alert spans from its first to its last predicted step
and is *true* when that span overlaps a labelled event, *false* otherwise. (With ``merge_gap = 0``
the span is the run itself; with a larger gap, an alert whose runs straddle a short event is true.)

:func:`alert_curve` gives, for every distinct threshold at once, the event recall and the number of
false alerts, from sorting the scores with each step's change carried along
(:mod:`benchkit.metrics.coded_sort`). The counting rests on three facts:

- step ``t`` starts an alert exactly at the thresholds ``window[t] < θ <= score[t]``, where
  ``window[t]`` is the highest score among the ``gap + 1`` steps before it (``-inf`` before the
  series): so each start adds 1 at its own score and takes 1 away at ``window[t]``, and with
  ``gap = 0`` that is the score of the step before, known by position without any search;
- an alert that starts on a labelled step is true; one that starts in the normal stretch before
  an event is true exactly when it runs into that event, and at most one alert per stretch can;
- that alert exists over one interval of thresholds: up to the highest threshold at which a
  predicted step of the stretch is joined to the event, and above the threshold at which no
  window of ``gap + 1`` unpredicted steps meets the stretch any more (the alert then began
  before the stretch).

So false alerts = alert starts on unlabelled steps minus one per stretch over its interval; the
+1s and -1s, laid out in the order of the sorted scores, summed cumulatively and read at the last
step of each distinct score, give them at every threshold in O(n log n).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from benchkit.metrics.coded_sort import sorted_codes
from benchkit.metrics.event_level import delays_of
from benchkit.metrics.events import runs_of, segment_max, segment_min, segment_sums
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


def window_max_before(values: np.ndarray, width: int) -> np.ndarray:
    """``out[i] = max(values[i - width : i])`` for ``i`` in ``0 .. len(values) + width - 1``,
    steps outside the array counting as ``-inf``.

    Doubling in one buffer: maxima over windows of 1, 2, 4, ... steps, each pass one
    ``maximum`` of the buffer with itself shifted, then two overlapping power-of-two windows
    cover ``width`` (O(n log width)).
    """
    n = len(values)
    padded = np.full(n + 2 * width, -np.inf)
    padded[width : width + n] = values
    span = 1
    while span * 2 <= width:
        np.maximum(padded[:-span], padded[span:], out=padded[:-span])
        span *= 2
    return np.maximum(padded[: n + width], padded[width - span : width - span + n + width])


class _Windows(NamedTuple):
    """``at(i)``: the highest score among steps ``i - gap - 1 .. i - 1`` (``-inf`` outside the
    series), read from ``values[i - offset]``: the scores themselves (offset 1) when
    ``gap = 0``, else the window maxima (offset 0)."""

    values: np.ndarray
    offset: int

    def at(self, i: np.ndarray) -> np.ndarray:
        j = i - self.offset
        return np.where(j >= 0, self.values[np.maximum(j, 0)], -np.inf)

    def min_over(self, starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
        """Lowest window value over each ordered, disjoint, non-empty ``[start, stop)``."""
        return segment_min(self.values, starts - self.offset, stops - self.offset)


def _last_alert_scores(s, windows: _Windows, events, gap) -> tuple[np.ndarray, np.ndarray]:
    """Per normal stretch before each event: the thresholds ``(low, high]`` at which one alert
    that starts in the stretch runs into the event (so it is true although it starts there).

    ``windows.at(i)`` is the highest score among steps ``i - gap - 1 .. i - 1``: the window of
    ``gap + 1`` steps that starts at ``i - gap - 1`` is unpredicted exactly at thresholds above
    it. For the stretch ``[a, e - 1]`` before the event that starts at ``e``: ``high`` is the
    highest threshold at which a predicted step ``p`` of the stretch is joined to the event (no
    unpredicted window starts in ``(p, e]``); at or below ``low`` no unpredicted window meets
    ``[a - 1, e]``, so that alert began before the stretch.
    """
    e = events[:, 0]
    a = np.concatenate(([0], events[:-1, 1] + 1))
    shift = gap + 1
    high = np.empty(len(e))
    near = np.empty(len(e))
    back = np.arange(1, shift + 1)
    chunk = max(1, 4_000_000 // shift)
    for lo in range(0, len(e), chunk):  # chunks of events keep the (events, gap + 1) grid small
        ends, begins = e[lo : lo + chunk, None], a[lo : lo + chunk, None]
        p = ends - back
        joined = np.minimum.accumulate(windows.at(p + 1 + shift), axis=1)
        own = np.where(p >= begins, s[np.maximum(p, 0)], -np.inf)
        high[lo : lo + chunk] = np.minimum(own, joined).max(axis=1)
        near[lo : lo + chunk] = windows.at(begins + back - 1).min(axis=1)
    reach = np.minimum(near, windows.min_over(a + shift, e + 1 + shift))
    low = np.where(a > 0, reach, -np.inf)
    return np.minimum(high, low), high


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
    n = len(s)
    # A step t starts an alert at the thresholds window[t] < θ <= s[t]; those on unlabelled
    # steps count +1 at their own score and -1 at the window's highest score.
    if gap == 0:
        windows = _Windows(s, 1)
        starts = np.empty(n, dtype=bool)
        starts[0] = True
        np.greater(s[1:], s[:-1], out=starts[1:])
        np.greater(starts, y, out=starts)  # ... and unlabelled
        codes = starts.view(np.int8) + np.int8(1)  # code = change + 1
        codes[:-1] -= starts[1:]  # the -1 sits on the step before: known without a search
    else:
        windows = _Windows(window_max_before(s, gap + 1), 0)
        before = windows.values[:n]
        starts = s > before
        np.greater(starts, y, out=starts)
        codes = starts.view(np.int8) + np.int8(1)  # the -1s are placed by score below
    ascending, change_codes, tied = sorted_codes(s, codes)
    never = int(np.searchsorted(ascending, -np.inf, side="right"))  # -inf sorts first
    finite = n - never
    if finite == 0:
        return AlertCurve(np.empty(0), np.empty(0), np.empty(0, dtype=np.int64))
    # change[r] belongs to the r-th highest finite score; summed from the top and read at the
    # last rank of each distinct score, it gives the false alerts at that threshold.
    change = change_codes[:finite]
    change -= 1  # now -1, 0 or 1
    tied = tied[never:]
    # Corrections by score, each at the first rank holding the score: -1 at each start's window
    # maximum (gap > 0; with gap 0 it was carried with the step before), and per event -1 from
    # `high` down and +1 from `low` down (see _last_alert_scores).
    corrections = []
    if gap > 0:
        window_maxima = np.sort(before[starts])  # only how many at each rank matters
        at = np.searchsorted(ascending, window_maxima, side="right") - never
        corrections.append((at, -1))
    events = runs_of(y)
    if len(events):
        low, high = _last_alert_scores(s, windows, events, gap)
        e = len(events)
        maxima = segment_max(s, events[:, 0], events[:, 1] + 1)
        at = _positions(ascending, np.concatenate((high, low, maxima)), never)
        corrections += [(at[:e], -1), (at[e : 2 * e], 1)]
        found = finite - at[2 * e :]  # the rank from which each event is detected
    if corrections:
        _add_at(change, corrections)
    false_alerts = np.cumsum(change, out=change)
    if not tied.any():
        thresholds = ascending[never:][::-1]
    else:  # keep each distinct score once, and the sums at its last rank
        first = np.empty(finite, dtype=bool)  # ascending: first position of each score
        first[0] = True
        np.logical_not(tied, out=first[1:])
        distinct = ascending[never:][first]
        last = first[::-1].copy()  # descending: last rank of each score
        thresholds, false_alerts, finite = distinct[::-1], false_alerts[last], len(distinct)
        if len(events):  # the distinct score from which each event is detected
            found = finite - np.searchsorted(distinct, maxima, side="right")
    recall = _recall_from_top(found, finite) if len(events) else np.zeros(finite)
    return AlertCurve(thresholds, recall, false_alerts)


def _positions(ascending: np.ndarray, values: np.ndarray, never: int) -> np.ndarray:
    """Highest position among the finite scores holding each value, as the number of finite
    scores up to it (0 for ``-inf``). The values are searched in sorted order, which touches
    less memory, and the answers put back in their order."""
    arranged = np.argsort(values)
    at = np.empty(len(values), dtype=np.int64)
    at[arranged] = np.searchsorted(ascending, values[arranged], side="right") - never
    return at


def _add_at(change: np.ndarray, corrections: list[tuple[np.ndarray, int]]) -> None:
    """For each ``(at, sign)``: ``sign`` added to ``change`` (highest score first) at the rank
    of the highest finite position ``at - 1``, repeats adding up; ``at = 0`` (``-inf``)
    skipped."""
    finite = len(change)
    for at, sign in corrections:
        np.add.at(change, finite - at[at > 0], sign)


def _recall_from_top(found: np.ndarray, finite: int) -> np.ndarray:
    """Event recall when the top ``r + 1`` finite scores are predicted, for each ``r``, given
    the rank (from the top) at which each event's highest score comes in: a step function
    written run by run."""
    runs = np.diff(np.concatenate(([0], np.sort(found), [finite])))
    return np.repeat(np.arange(len(found) + 1) / len(found), runs)


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
