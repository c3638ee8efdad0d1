"""The PyOD adapter against PyOD's own models on the same window features."""

from __future__ import annotations

import numpy as np
import pytest
from pyod.models.copod import COPOD
from pyod.models.ecod import ECOD
from pyod.models.knn import KNN
from pyod.models.lof import LOF

from benchkit import registry
from detectors._features import window_features


@pytest.fixture
def data():
    rng = np.random.default_rng(5)
    series = np.cumsum(rng.normal(size=(900, 3)), axis=0) * 0.05 + rng.normal(size=(900, 3))
    return series[:600], series[600:]


@pytest.mark.parametrize("name, model", [("pyod:ECOD", ECOD), ("pyod:COPOD", COPOD)])
def test_tail_models_score_each_step_as_pyod_scores_it_alone(data, name, model):
    train, test = data
    det = registry.create(name, window=6).fit(train)
    ours = det.score(test)[5:]
    rows = window_features(test, 6)
    # reference: PyOD's own model, decision_function called on one row at a time
    ref = model().fit(window_features(train, 6))
    picks = np.arange(0, rows.shape[0], 37)
    expected = [ref.decision_function(rows[i : i + 1])[0] for i in picks]
    np.testing.assert_allclose(ours[picks], expected, rtol=1e-9)
    # and why: PyOD pools a whole batch into the ECDF, so its batch scores depend on later rows
    assert not np.allclose(ref.decision_function(rows)[picks], expected, rtol=1e-9)


@pytest.mark.parametrize(
    "name, params, model",
    [("pyod:LOF", {"n_neighbors": 15}, lambda: LOF(n_neighbors=15)),
     ("pyod:KNN", {"n_neighbors": 4, "method": "mean"}, lambda: KNN(n_neighbors=4, method="mean"))],
)  # fmt: skip
def test_neighbour_models_equal_pyod_on_the_same_features(data, name, params, model):
    train, test = data
    det = registry.create(name, window=6, max_train=5000, **params).fit(train)
    # reference: the PyOD model fitted directly on the same window-feature rows
    ref = model().fit(window_features(train, 6))
    np.testing.assert_allclose(det.score(test)[5:], ref.decision_function(window_features(test, 6)),
                               rtol=1e-9)  # fmt: skip


def test_training_rows_are_subsampled_from_the_seed(data):
    train, test = data
    a = registry.create("pyod:KNN", max_train=50, seed=1).fit(train).score(test)
    b = registry.create("pyod:KNN", max_train=50, seed=1).fit(train).score(test)
    c = registry.create("pyod:KNN", max_train=50, seed=2).fit(train).score(test)
    assert np.array_equal(a, b) and not np.array_equal(a, c)
