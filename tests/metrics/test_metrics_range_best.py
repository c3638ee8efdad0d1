"""Best range-based F1 over quantile thresholds."""

import math

import numpy as np
import pytest
from metrics_cases import random_labels, random_scores

from benchkit.metrics import best_range_f1, range_precision_recall
from benchkit.metrics.range_best import quantile_thresholds

OPTIONS = [(alpha, cardinality, bias) for alpha in (0.0, 0.5) for cardinality in
           ("one", "reciprocal") for bias in ("flat", "front", "back", "middle")]


def _brute(scores, labels, thresholds, alpha, cardinality, bias):
    """(best F1, largest threshold reaching it) by scoring each threshold on its own."""
    best, where = 0.0, math.inf
    for threshold in thresholds:
        f1 = range_precision_recall(scores >= threshold, labels, alpha, cardinality, bias)[2]
        if f1 > 0 and f1 >= best - 1e-12:
            best, where = max(best, f1), threshold
    return best, where


@pytest.mark.parametrize("seed", range(12))
def test_exact_when_few_distinct_scores(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(2, 60))
    labels = random_labels(rng, n)
    scores = random_scores(rng, n, levels=12)
    for alpha, cardinality, bias in OPTIONS:
        got = best_range_f1(scores, labels, alpha, cardinality, bias)
        # reference: range_precision_recall (checked against prts) at every distinct threshold
        want, _ = _brute(scores, labels, np.unique(scores[np.isfinite(scores)]), alpha,
                         cardinality, bias)
        assert got.f1 == pytest.approx(want, abs=1e-9)
        if got.f1 > 0:
            at = range_precision_recall(scores >= got.threshold, labels, alpha, cardinality, bias)
            assert (got.precision, got.recall, got.f1) == pytest.approx(at, abs=1e-9)


@pytest.mark.parametrize("seed", range(3))
def test_many_distinct_scores_search_the_stated_candidates(seed):
    rng = np.random.default_rng(seed)
    n = 1500
    labels = random_labels(rng, n, rate=0.05)
    scores = rng.normal(size=n) + 1.5 * labels
    candidates = quantile_thresholds(scores, labels.astype(bool), 512, np.empty(0))
    assert len(candidates) >= 512
    for alpha, cardinality, bias in [(0.0, "one", "flat"), (0.5, "reciprocal", "middle")]:
        got = best_range_f1(scores, labels, alpha, cardinality, bias)
        want, _ = _brute(scores, labels, candidates, alpha, cardinality, bias)
        assert got.f1 == pytest.approx(want, abs=1e-9)
        assert got.threshold in candidates


def test_extra_thresholds_are_searched():
    rng = np.random.default_rng(5)
    n = 3000
    labels = random_labels(rng, n, rate=0.04)
    scores = rng.normal(size=n) + labels
    extra = np.array([0.731])
    assert 0.731 in quantile_thresholds(scores, labels.astype(bool), 512, extra)
    plain = best_range_f1(scores, labels, n_thresholds=2)
    wider = best_range_f1(scores, labels, n_thresholds=2, extra_thresholds=extra)
    direct = range_precision_recall(scores >= 0.731, labels)[2]
    assert wider.f1 >= max(plain.f1, direct) - 1e-12


def test_edge_cases():
    # by hand: no events -> nothing to gain, θ = +inf
    assert best_range_f1(np.arange(6.0), np.zeros(6)) == (0.0, 0.0, 0.0, math.inf)
    # perfectly separated single-point events at both ends -> F1 1 at the lower event score
    got = best_range_f1(np.array([5.0, 0, 1, 2, 6]), np.array([1, 0, 0, 0, 1]))
    assert (got.f1, got.threshold) == (1.0, 5.0)
    # all scores -inf: never predicted
    assert best_range_f1(np.full(4, -np.inf), np.array([0, 1, 1, 0])).f1 == 0.0
    # everything labelled: one range, any threshold at the minimum covers it
    assert best_range_f1(np.array([3.0, 1.0, 2.0]), np.ones(3)).f1 == 1.0
