"""isolation-forest against scikit-learn's IsolationForest on the same features and seed."""

from __future__ import annotations

import numpy as np
from scipy.stats import spearmanr
from sklearn.ensemble import IsolationForest

from benchkit import registry
from detectors._features import window_features


def _data():
    rng = np.random.default_rng(21)
    t = np.arange(1500)[:, None]
    base = np.sin(2 * np.pi * t / 96) * rng.uniform(0.5, 2.0, 6)
    series = base + 0.3 * rng.normal(size=(1500, 6))
    return series[:1000], series[1000:]


def test_scores_rank_correlate_with_sklearn_isolation_forest():
    train, test = _data()
    det = registry.create("isolation-forest", window=8, n_estimators=200, seed=3).fit(train)
    # reference: sklearn.ensemble.IsolationForest fitted on the same window features with the
    # random_state the detector derived from its seed; scipy.stats.spearmanr for the ranks
    ref = IsolationForest(n_estimators=200, max_samples=256,
                          random_state=det.model_.random_state).fit(window_features(train, 8))
    expected = -ref.score_samples(window_features(test, 8))
    ours = det.score(test)[7:]
    assert spearmanr(ours, expected).statistic >= 0.99


def test_seed_drives_the_forest():
    train, test = _data()
    a = registry.create("isolation-forest", seed=1).fit(train).score(test)
    b = registry.create("isolation-forest", seed=1).fit(train).score(test)
    c = registry.create("isolation-forest", seed=2).fit(train).score(test)
    assert np.array_equal(a, b) and not np.array_equal(a, c)


def test_injected_outliers_rank_high():
    # sanity check on invented data: a burst far outside the training range is isolated fast
    train, test = _data()
    test = test.copy()
    test[200:205] += 6.0
    scores = registry.create("isolation-forest").fit(train).score(test)
    assert scores[200:205].min() > np.quantile(scores[20:190], 0.99)


def test_max_train_caps_the_rows_the_forest_sees():
    train, _ = _data()
    det = registry.create("isolation-forest", max_train=100, max_samples=256).fit(train)
    assert det.model_.detector_.max_samples_ == 100
