"""Trivial references: random scores and step change."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.spatial import distance

from benchkit import registry
from benchkit.detector import WARMUP_SCORE


def test_random_scores_are_uniform_and_follow_the_seed():
    train = np.zeros((50, 2))
    series = np.zeros((5000, 2))
    a = registry.create("random", seed=4).fit(train).score(series)
    # reference: scipy.stats.kstest against the uniform distribution on [0, 1)
    assert stats.kstest(a, "uniform").pvalue > 0.01
    assert np.array_equal(a, registry.create("random", seed=4).fit(train).score(series + 9.0))
    assert not np.array_equal(a, registry.create("random", seed=5).fit(train).score(series))


def test_step_change_worked_example():
    # worked example computed by hand: steps (0,0) -> (3,4) -> (3,4) -> (0,0)
    series = np.array([[0.0, 0.0], [3.0, 4.0], [3.0, 4.0], [0.0, 0.0]])
    det = registry.create("step-change").fit(series)
    np.testing.assert_array_equal(det.score(series), [WARMUP_SCORE, 5.0, 0.0, 5.0])
    assert det.warmup == 1


@pytest.mark.parametrize("norm, metric", [("l2", "euclidean"), ("l1", "cityblock"),
                                          ("max", "chebyshev")])  # fmt: skip
def test_step_change_norms_match_scipy_distances(norm, metric):
    series = np.random.default_rng(0).normal(size=(40, 5))
    scores = registry.create("step-change", norm=norm).fit(series).score(series)
    # reference: scipy.spatial.distance between consecutive points
    expected = [distance.cdist(series[t - 1 : t], series[t : t + 1], metric)[0, 0]
                for t in range(1, 40)]  # fmt: skip
    np.testing.assert_allclose(scores[1:], expected, rtol=1e-12)
