"""Scores ranked once per (scores, labels) pair and shared by every exact best-F1 search.

Every adjustment is a rule on labelled points only: at threshold θ a labelled point counts as a
true positive exactly when its *effective score* is ``>= θ``, while unlabelled points are false
positives when their own score is ``>= θ``. Effective scores: point-wise, the point's score; point
adjustment, its event's maximum; PA%K, the larger of its score and the score at which its event
first has more than K % of points predicted; delay-bounded, the maximum over its event's first
``delay + 1`` points. So one sort of the unlabelled scores, one per-event sort of the labelled ones
and cumulative counts give precision and recall at every threshold at once.
"""

from __future__ import annotations

from functools import cached_property

import numpy as np

from benchkit.metrics.adjust import delay_windows, pak_needed
from benchkit.metrics.events import event_index, lengths, runs_of, segment_max
from benchkit.metrics.inputs import MetricInputError, check_choice, check_delay, check_percent

ADJUSTMENTS = (None, "point", "pa%k", "delay")


class Tally:
    """Weighted values sorted once, answering "how much weight is at or above θ" for many θ."""

    def __init__(self, values: np.ndarray, weights: np.ndarray | None = None) -> None:
        if weights is None:
            self.values = np.sort(values)
            self.cumulative = None
            self.total = len(values)
        else:
            order = np.argsort(values)
            self.values = values[order]
            self.cumulative = np.concatenate(([0], np.cumsum(weights[order])))
            self.total = int(self.cumulative[-1])

    def at_least(self, thresholds: np.ndarray) -> np.ndarray:
        """Weight of the values ``>= threshold`` for each threshold (int64)."""
        below = np.searchsorted(self.values, thresholds, side="left")
        if self.cumulative is None:
            return self.total - below
        return self.total - self.cumulative[below]

    def distinct_finite(self) -> np.ndarray:
        """Distinct finite values, ascending (``-inf`` is never a threshold)."""
        values = self.values[np.searchsorted(self.values, -np.inf, side="right") :]
        if len(values) == 0:
            return values
        keep = np.empty(len(values), dtype=bool)
        keep[0] = True
        np.not_equal(values[1:], values[:-1], out=keep[1:])
        return values[keep]


def check_adjust(adjust: object, k: object, delay: object) -> tuple[str | None, float, int]:
    """Validate ``adjust`` and the one parameter it needs; reject a parameter it ignores."""
    check_choice(adjust, "adjust", ADJUSTMENTS)
    k = _parameter_of(adjust, "pa%k", "k", k, "percent, 0 to 100", check_percent)
    delay = _parameter_of(adjust, "delay", "delay", delay, "steps, >= 0", check_delay)
    return adjust, (0.0 if k is None else float(k)), (0 if delay is None else int(delay))


def _parameter_of(adjust, owner: str, name: str, value, meaning: str, check):
    """``check(value)`` when ``adjust`` is ``owner`` (which needs it); else it must be None."""
    if adjust != owner:
        if value is not None:
            raise MetricInputError(
                f"{name}: only used with adjust={owner!r}, not adjust={adjust!r}"
            )
        return None
    if value is None:
        raise MetricInputError(f"{name}: adjust={owner!r} needs {name} ({meaning})")
    return check(value)


class RankedScores:
    """Validated scores and labels with the sorts that every adjustment reuses."""

    def __init__(self, scores: np.ndarray, labels: np.ndarray) -> None:
        self.scores = scores
        self.labels = labels
        self.events = runs_of(labels)
        self.sizes = lengths(self.events)
        self.n_positive = int(self.sizes.sum())
        self.negatives = Tally(scores[~labels])

    @cached_property
    def positive_scores(self) -> np.ndarray:
        """Scores of the labelled points, in time order (so grouped by event)."""
        return self.scores[self.labels]

    @cached_property
    def descending_within_events(self) -> np.ndarray:
        """Labelled scores sorted from high to low inside each event, events in time order."""
        order = np.lexsort((-self.positive_scores, event_index(self.events)))
        return self.positive_scores[order]

    def _event_max(self, stops: np.ndarray) -> np.ndarray:
        return segment_max(self.scores, self.events[:, 0], stops)

    def effective(self, adjust: str | None, k: float = 0.0, delay: int = 0) -> Tally:
        """Tally of the labelled points' effective scores under one adjustment."""
        if adjust is None:
            return Tally(self.positive_scores)
        if adjust == "point":
            return Tally(self._event_max(self.events[:, 1] + 1), self.sizes)
        if adjust == "delay":
            return Tally(self._event_max(delay_windows(self.events, delay)[1]), self.sizes)
        return Tally(self.pak_effective(k))

    def pak_effective(self, k: float) -> np.ndarray:
        """Effective scores under PA%K: max(own score, score at which the event passes K %)."""
        need = pak_needed(self.sizes, k)
        offsets = np.concatenate(([0], np.cumsum(self.sizes)[:-1]))
        passable = need <= self.sizes
        at = np.where(passable, offsets + need - 1, 0)
        ranked = self.descending_within_events
        activation = np.where(passable, ranked[at] if len(ranked) else -np.inf, -np.inf)
        return np.maximum(self.positive_scores, np.repeat(activation, self.sizes))

    def counts(self, positives: Tally, thresholds: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """(TP, FP) at each threshold for the given effective positive tally."""
        return positives.at_least(thresholds), self.negatives.at_least(thresholds)

    def all_thresholds(self, positives: Tally) -> np.ndarray:
        """Every distinct finite effective score or unlabelled score, descending."""
        both = np.concatenate((positives.distinct_finite(), self.negatives.distinct_finite()))
        return np.unique(both)[::-1]


def rank(scores: np.ndarray, labels: np.ndarray) -> RankedScores:
    """Build the shared ranking (inputs already validated)."""
    return RankedScores(scores, labels)
