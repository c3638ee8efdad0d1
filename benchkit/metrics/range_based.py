"""Range-based precision and recall (Tatbul et al., NeurIPS 2018), linear in points plus ranges.

Recall of a real range R: α·[R overlaps a prediction] + (1 − α)·γ·Σ ω(R, R ∩ P_j, δ), averaged
over real ranges. Precision of a predicted range P: γ·Σ ω(P, P ∩ R_i, δ), averaged over predicted
ranges; α applies to recall only, as the paper sets it. With no real (predicted) ranges, recall
(precision) is 0.0.
"""

from __future__ import annotations

import numpy as np

from benchkit.metrics.events import runs_of
from benchkit.metrics.inputs import MetricInputError, binary_pair, check_choice
from benchkit.metrics.pointwise import harmonic_mean
from benchkit.metrics.positional import (
    BIASES,
    CARDINALITIES,
    cardinality_factor,
    overlap_reward,
    prefix_sums,
)


def check_range_options(alpha: object, cardinality: object, bias: object) -> float:
    """Validate the range-model options; return ``alpha`` as a float."""
    check_choice(cardinality, "cardinality", CARDINALITIES)
    check_choice(bias, "bias", BIASES)
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float, np.integer, np.floating)):
        raise MetricInputError(f"alpha: expected a number from 0 to 1, got {alpha!r}")
    if not 0.0 <= float(alpha) <= 1.0:
        raise MetricInputError(f"alpha: expected a number from 0 to 1, got {alpha!r}")
    return float(alpha)


def overlap_counts(ranges: np.ndarray, others: np.ndarray) -> np.ndarray:
    """For each range, how many of the (disjoint, ordered) ``others`` it intersects."""
    begun = np.searchsorted(others[:, 0], ranges[:, 1], side="right")
    ended = np.searchsorted(others[:, 1], ranges[:, 0], side="left")
    return begun - ended


def _mean(values: np.ndarray) -> float:
    return float(values.mean()) if len(values) else 0.0


def range_precision_recall(
    pred: object,
    labels: object,
    alpha: float = 0.0,
    cardinality: str = "one",
    bias: str = "flat",
) -> tuple[float, float, float]:
    """Range-based precision, recall and F1 of a 0/1 prediction.

    Parameters
    ----------
    pred, labels : 1-D 0/1 arrays of the same length.
    alpha : weight of the existence reward in recall, in [0, 1].
    cardinality : ``"one"`` (γ = 1) or ``"reciprocal"`` (γ = 1/overlaps when above one).
    bias : positional bias δ: ``"flat"``, ``"front"``, ``"back"`` or ``"middle"``.

    Returns
    -------
    (precision, recall, f1), f1 the harmonic mean.
    """
    p, y = binary_pair(pred, labels)
    alpha = check_range_options(alpha, cardinality, bias)
    real, predicted = runs_of(y), runs_of(p)

    pred_count, pred_index = prefix_sums(p)
    hits = overlap_counts(real, predicted)
    reward = overlap_reward(pred_count, pred_index, real[:, 0], real[:, 1], bias)
    recall = alpha * (hits > 0) + (1.0 - alpha) * cardinality_factor(hits, cardinality) * reward

    label_count, label_index = prefix_sums(y)
    touches = overlap_counts(predicted, real)
    reward = overlap_reward(label_count, label_index, predicted[:, 0], predicted[:, 1], bias)
    precision = cardinality_factor(touches, cardinality) * reward

    p_mean, r_mean = _mean(precision), _mean(recall)
    return p_mean, r_mean, float(harmonic_mean(p_mean, r_mean))
