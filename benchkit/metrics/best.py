"""Exact best F1 over every distinct score threshold, and the full F1 curve, for each adjustment.

A threshold θ predicts ``scores >= θ``; ``-inf`` scores are never predicted. The best F1 is
reached at a labelled point's effective score (between two of them TP is fixed and the largest θ
has the fewest false positives), so only those are searched. Ties go to the largest threshold.
When no threshold gives F1 above 0 the result is F1 = precision = recall = 0 at θ = +inf.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from benchkit.metrics.inputs import scores_and_labels
from benchkit.metrics.pointwise import f1_from_counts, ratio
from benchkit.metrics.ranking import RankedScores, Tally, check_adjust


class BestF1(NamedTuple):
    """The best F1 and the precision, recall and threshold where it is reached."""

    f1: float
    precision: float
    recall: float
    threshold: float


class F1Curve(NamedTuple):
    """Precision, recall and F1 at every distinct threshold (thresholds descending)."""

    thresholds: np.ndarray
    precision: np.ndarray
    recall: np.ndarray
    f1: np.ndarray


NO_BEST = BestF1(0.0, 0.0, 0.0, float("inf"))


def best_from_tally(ranked: RankedScores, positives: Tally) -> BestF1:
    """Best F1 over the distinct finite effective scores in ``positives``."""
    thresholds = positives.distinct_finite()
    if len(thresholds) == 0:
        return NO_BEST
    tp, fp = ranked.counts(positives, thresholds)
    f1 = f1_from_counts(tp, fp, ranked.n_positive - tp)
    at = len(f1) - 1 - int(np.argmax(f1[::-1]))
    if f1[at] <= 0.0:
        return NO_BEST
    return BestF1(
        float(f1[at]),
        float(tp[at] / (tp[at] + fp[at])),
        float(tp[at] / ranked.n_positive),
        float(thresholds[at]),
    )


def _ranked(scores, labels, adjust, k, delay) -> tuple[RankedScores, Tally]:
    """Validate everything, rank once, and tally the effective scores of labelled points."""
    adjust, k, delay = check_adjust(adjust, k, delay)
    ranked = RankedScores(*scores_and_labels(scores, labels))
    return ranked, ranked.effective(adjust, k, delay)


def best_f1(
    scores: object,
    labels: object,
    adjust: str | None = None,
    k: float | None = None,
    delay: int | None = None,
) -> BestF1:
    """Exact best F1 over every distinct threshold of ``scores``.

    Parameters
    ----------
    scores : 1-D float scores, higher = more anomalous; ``-inf`` allowed (never predicted).
    labels : 1-D 0/1 labels of the same length.
    adjust : ``None`` (point-wise), ``"point"`` (point adjustment), ``"pa%k"`` (needs ``k``) or
        ``"delay"`` (needs ``delay``).

    Returns
    -------
    BestF1(f1, precision, recall, threshold), in O(n log n) time.
    """
    ranked, positives = _ranked(scores, labels, adjust, k, delay)
    return best_from_tally(ranked, positives)


def f1_curve(
    scores: object,
    labels: object,
    adjust: str | None = None,
    k: float | None = None,
    delay: int | None = None,
) -> F1Curve:
    """Precision, recall and F1 at every distinct finite threshold, thresholds descending.

    Same parameters as :func:`best_f1`; for plots. Recall is 0.0 when there are no labelled points.
    """
    ranked, positives = _ranked(scores, labels, adjust, k, delay)
    thresholds = ranked.all_thresholds(positives)
    tp, fp = ranked.counts(positives, thresholds)
    return F1Curve(
        thresholds,
        ratio(tp, tp + fp),
        ratio(tp, ranked.n_positive),
        f1_from_counts(tp, fp, ranked.n_positive - tp),
    )
