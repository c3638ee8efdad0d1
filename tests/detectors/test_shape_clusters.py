"""shape-clusters: nearest-centroid distances against scipy, and behaviour on invented data."""

from __future__ import annotations

import numpy as np
from scipy.spatial.distance import cdist

from benchkit import registry
from benchkit.windows import sliding_windows
from detectors.shape_clusters import nearest_centroid_distance


def test_euclidean_distance_matches_scipy_cdist():
    rng = np.random.default_rng(0)
    windows, centroids = rng.normal(size=(30, 6, 3)), rng.normal(size=(4, 6, 3))
    # reference: scipy.spatial.distance.cdist on the flattened windows
    expected = cdist(windows.reshape(30, -1), centroids.reshape(4, -1)).min(axis=1)
    np.testing.assert_allclose(nearest_centroid_distance(windows, centroids),
                               expected, rtol=1e-9)  # fmt: skip


def test_score_is_distance_of_the_window_ending_at_t():
    rng = np.random.default_rng(2)
    train, test = rng.normal(size=(500, 2)), rng.normal(size=(100, 2))
    det = registry.create("shape-clusters", window=10, n_clusters=4).fit(train)
    scores = det.score(test)
    expected = nearest_centroid_distance(sliding_windows(test, 10), det.centroids_)
    np.testing.assert_array_equal(scores[9:], expected)
    assert np.all(np.isneginf(scores[:9]))


def test_an_unseen_shape_scores_higher():
    # sanity check on invented data: a sawtooth never seen in the sine-wave training data
    t = np.arange(2000)
    train = np.sin(2 * np.pi * t / 50.0)[:, None]
    test = np.sin(2 * np.pi * np.arange(400) / 50.0)[:, None].copy()
    test[200:240, 0] = ((np.arange(40) % 10) / 5.0) - 1.0
    scores = registry.create("shape-clusters", window=16).fit(train).score(test)
    assert scores[215:240].min() > scores[20:190].max()


def test_more_clusters_than_distinct_windows_is_handled():
    train = np.zeros((100, 3))
    det = registry.create("shape-clusters", n_clusters=8).fit(train)
    assert det.centroids_.shape[0] == 1
    assert np.isfinite(det.score(np.ones((40, 3)))[15:]).all()
