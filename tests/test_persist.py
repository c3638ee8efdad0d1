"""Saving fitted detectors without pickle (benchkit/persist.py): round trips and refusals.

The round trip of every built-in is checked by the contract kit (tests/detectors); here: the
refit route of tree-ensemble and neighbour models refuses changed data, and nothing loads a
pickle. Reference for "no pickle": numpy's ``np.load(allow_pickle=False)`` raises on object
arrays (numpy documentation of ``numpy.load``).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from benchkit import registry
from benchkit.errors import DataError
from benchkit.persist import save_npz
from benchkit.testing import make_check_data


@pytest.fixture
def forest(tmp_path):
    det = registry.create("isolation-forest", n_estimators=10, seed=3)
    det.fit(make_check_data(300, 3, seed=1))
    path = tmp_path / "model.npz"
    det.save(path)
    return det, path


def _rewrite(path, change):
    with np.load(path, allow_pickle=False) as z:
        arrays = {k: z[k] for k in z.files}
    meta = json.loads(str(arrays.pop("__meta__")))
    change(meta, arrays)
    save_npz(path, meta, arrays)


def test_refit_route_reproduces_the_scores(forest):
    det, path = forest
    series = make_check_data(200, 3, seed=2)
    loaded = type(det).load(path)
    assert loaded.score(series).tobytes() == det.score(series).tobytes()


def test_refit_route_refuses_changed_training_data(forest):
    _, path = forest
    _rewrite(path, lambda meta, arrays: arrays["train"].__setitem__((5, 1), 0.5))
    with pytest.raises(DataError, match="does not match its recorded sha256"):
        registry.get("isolation-forest").load(path)


def test_refit_route_refuses_a_refit_that_scores_differently(forest):
    _, path = forest
    _rewrite(path, lambda meta, arrays: meta.__setitem__("probe_sha256", "0" * 64))
    with pytest.raises(DataError, match="does not reproduce the saved model's scores"):
        registry.get("isolation-forest").load(path)


def test_a_file_of_another_detector_or_format_is_refused(forest, tmp_path):
    _, path = forest
    with pytest.raises(DataError, match="holds a 'isolation-forest' model, not 'pyod:KNN'"):
        registry.get("pyod:KNN").load(path)
    with pytest.raises(DataError, match="format"):
        registry.get("pca-residual").load(path)


def test_object_arrays_are_never_unpickled(tmp_path):
    path = tmp_path / "evil.npz"
    np.savez(path, __meta__=np.array("{}"), state=np.array([{"a": 1}], dtype=object))
    with pytest.raises(DataError, match="not a saved benchkit model"):
        registry.get("pca-residual").load(path)


def test_none_and_integer_state_round_trip(tmp_path):
    det = registry.create("pca-residual", n_components=0, statistic="t2")
    det.fit(make_check_data(200, 3, seed=4))
    assert det.t2_limit_ is None  # no retained component: no T² limit
    det.save(tmp_path / "m.npz")
    loaded = registry.get("pca-residual").load(tmp_path / "m.npz")
    assert loaded.t2_limit_ is None and loaded.n_components_ == 0
    assert isinstance(loaded.n_train_, int)
