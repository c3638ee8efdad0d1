"""Point-wise precision, recall and F1."""

import numpy as np
import pytest
from sklearn.metrics import precision_recall_fscore_support

from benchkit.metrics import prf


@pytest.mark.parametrize("seed", range(40))
def test_prf_matches_scikit_learn(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 60))
    labels = (rng.random(n) < rng.uniform(0, 0.7)).astype(np.int8)
    pred = (rng.random(n) < rng.uniform(0, 0.7)).astype(np.int8)
    # reference: sklearn.metrics.precision_recall_fscore_support, binary, zero_division=0
    want = precision_recall_fscore_support(
        labels, pred, average="binary", zero_division=0, labels=[0, 1]
    )[:3]
    assert prf(pred, labels) == pytest.approx(want, abs=1e-12)


@pytest.mark.parametrize(
    ("pred", "labels", "want"),
    [
        # worked by hand from P = TP/(TP+FP), R = TP/(TP+FN), zero denominators give 0
        ([1, 1, 0, 0], [1, 0, 1, 0], (0.5, 0.5, 0.5)),
        ([0, 0, 0, 0], [1, 0, 1, 0], (0.0, 0.0, 0.0)),  # no predictions
        ([1, 1, 1, 1], [1, 0, 0, 0], (0.25, 1.0, 0.4)),  # everything predicted
        ([1, 0, 0, 0], [0, 0, 0, 0], (0.0, 0.0, 0.0)),  # no labelled events
        ([1, 0, 0, 1], [1, 0, 0, 1], (1.0, 1.0, 1.0)),  # events at both ends
    ],
)
def test_prf_worked_examples(pred, labels, want):
    assert prf(np.array(pred), np.array(labels)) == pytest.approx(want)


def test_prf_accepts_bool_and_float_zero_one():
    assert prf(np.array([True, False]), np.array([1.0, 0.0])) == (1.0, 1.0, 1.0)
