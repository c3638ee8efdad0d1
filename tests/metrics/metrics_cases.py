"""Shared helpers for the metrics tests: small random cases and brute-force references."""

from __future__ import annotations

import numpy as np

from benchkit.metrics import delay_adjust, pa_k_adjust, point_adjust, prf


def random_labels(rng: np.random.Generator, n: int, rate: float | None = None) -> np.ndarray:
    """Random 0/1 labels with runs (invented data, only for comparisons with references)."""
    rate = rng.uniform(0.05, 0.6) if rate is None else rate
    flips = rng.random(n) < rate * 0.5
    return (np.cumsum(flips) % 2).astype(np.int8)


def random_scores(rng: np.random.Generator, n: int, levels: int = 8) -> np.ndarray:
    """Scores with ties (few distinct values) and a few -inf warm-up points."""
    scores = rng.integers(0, levels, n).astype(np.float64)
    scores[: rng.integers(0, 3)] = -np.inf
    return scores


def adjusted(pred: np.ndarray, labels: np.ndarray, adjust, k=None, delay=None) -> np.ndarray:
    """Apply one adjustment by its public function (each checked by hand-worked examples)."""
    if adjust is None:
        return pred
    if adjust == "point":
        return point_adjust(pred, labels)
    if adjust == "pa%k":
        return pa_k_adjust(pred, labels, k)
    return delay_adjust(pred, labels, delay)


def brute_best_f1(scores, labels, adjust=None, k=None, delay=None) -> tuple[float, float]:
    """(best F1, largest threshold reaching it) by trying every distinct finite score.

    Returns (0.0, +inf) when no threshold gives F1 above 0.
    """
    best, where = 0.0, np.inf
    for threshold in np.unique(scores[np.isfinite(scores)]):
        f1 = prf(adjusted(scores >= threshold, labels, adjust, k, delay), labels)[2]
        if f1 > 0 and f1 >= best:
            best, where = f1, threshold
    return best, float(where)
