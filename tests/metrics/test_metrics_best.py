"""Exact best F1 over all thresholds, and the F1 curve."""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from metrics_cases import adjusted, brute_best_f1, random_labels, random_scores
from sklearn.metrics import precision_recall_curve

from benchkit.metrics import MetricInputError, best_f1, f1_curve, prf

ADJUSTS = [(None, {}), ("point", {}), ("pa%k", {"k": 0}), ("pa%k", {"k": 20}),
           ("pa%k", {"k": 50}), ("pa%k", {"k": 100}), ("pa%k", {"k": 12.5}),
           ("pa%k", {"k": 33}), ("delay", {"delay": 0}),
           ("delay", {"delay": 3})]


@st.composite
def cases(draw):
    n = draw(st.integers(1, 30))
    labels = np.array(draw(st.lists(st.integers(0, 1), min_size=n, max_size=n)), dtype=np.int8)
    values = st.one_of(st.integers(0, 6).map(float), st.just(-math.inf))
    scores = np.array(draw(st.lists(values, min_size=n, max_size=n)))
    return scores, labels


@pytest.mark.parametrize(("adjust", "params"), ADJUSTS)
@settings(max_examples=60, deadline=None)
@given(case=cases())
def test_best_f1_equals_brute_force_over_all_thresholds(adjust, params, case):
    scores, labels = case
    got = best_f1(scores, labels, adjust, **params)
    # reference: a loop over every distinct finite threshold, adjusting with the public
    # functions (themselves checked against hand-worked examples)
    want_f1, want_threshold = brute_best_f1(scores, labels, adjust, **params)
    assert got.f1 == pytest.approx(want_f1, abs=1e-12)
    assert got.threshold == want_threshold
    if math.isfinite(got.threshold):
        pred = adjusted(scores >= got.threshold, labels, adjust, **params)
        assert (got.precision, got.recall, got.f1) == pytest.approx(prf(pred, labels))
    else:
        assert (got.precision, got.recall, got.f1) == (0.0, 0.0, 0.0)


@pytest.mark.parametrize("seed", range(20))
def test_point_wise_best_f1_matches_scikit_learn_curve(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 300))
    labels = random_labels(rng, n)
    labels[rng.integers(n)] = 1
    scores = np.round(rng.normal(size=n) + labels, 1)  # ties on purpose
    # reference: sklearn.metrics.precision_recall_curve, F1 = 2PR/(P+R) at each threshold
    precision, recall, _ = precision_recall_curve(labels, scores)
    with np.errstate(invalid="ignore", divide="ignore"):
        f1 = np.nan_to_num(2 * precision * recall / (precision + recall))
    assert best_f1(scores, labels).f1 == pytest.approx(f1.max(), abs=1e-12)


@pytest.mark.parametrize("seed", range(10))
def test_point_wise_curve_matches_scikit_learn_curve(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 200))
    labels = random_labels(rng, n)
    labels[0] = 1
    scores = np.round(rng.normal(size=n), 1)
    curve = f1_curve(scores, labels)
    # reference: sklearn.metrics.precision_recall_curve (thresholds ascending, one extra point)
    precision, recall, thresholds = precision_recall_curve(labels, scores)
    np.testing.assert_array_equal(curve.thresholds, thresholds[::-1])
    np.testing.assert_allclose(curve.precision, precision[:-1][::-1], atol=1e-12)
    np.testing.assert_allclose(curve.recall, recall[:-1][::-1], atol=1e-12)


@pytest.mark.parametrize(("adjust", "params"), ADJUSTS)
def test_adjusted_curve_agrees_with_adjusting_at_each_threshold(adjust, params):
    rng = np.random.default_rng(7)
    labels = random_labels(rng, 60)
    scores = random_scores(rng, 60)
    curve = f1_curve(scores, labels, adjust, **params)
    assert np.all(np.diff(curve.thresholds) < 0)
    for threshold, p, r, f in zip(*curve, strict=True):
        pred = adjusted(scores >= threshold, labels, adjust, **params)
        assert (p, r, f) == pytest.approx(prf(pred, labels), abs=1e-12)
    assert best_f1(scores, labels, adjust, **params).f1 == pytest.approx(curve.f1.max())


def test_ties_go_to_the_largest_threshold():
    # by hand: θ = 4 gives TP 1, FN 1 -> F1 2/3; θ = 1 gives TP 2, FP 2 -> F1 2/3
    got = best_f1(np.array([4.0, 1.0, 3.0, 2.0]), np.array([1, 1, 0, 0]))
    assert got == (pytest.approx(2 / 3), 1.0, 0.5, 4.0)


def test_minus_infinity_is_never_predicted():
    scores = np.array([-np.inf, -np.inf, 0.5, 0.1])
    labels = np.array([1, 1, 0, 1])
    # by hand: the warm-up points stay false negatives at every finite threshold; best is
    # θ = 0.1 with TP 1, FP 1, FN 2 -> F1 = 2/5
    assert best_f1(scores, labels).f1 == pytest.approx(0.4)
    # point adjustment cannot reach them either: event [0, 1] has no finite score
    assert best_f1(scores, labels, "point").f1 == pytest.approx(0.4)
    assert best_f1(np.full(3, -np.inf), np.array([0, 1, 0])) == (0.0, 0.0, 0.0, math.inf)


@pytest.mark.parametrize(("adjust", "params"), ADJUSTS)
def test_edge_cases(adjust, params):
    # by hand: no events -> F1 0 at θ = +inf (predict nothing)
    assert best_f1(np.arange(5.0), np.zeros(5), adjust, **params) == (0.0, 0.0, 0.0, math.inf)
    # everything labelled -> the lowest score predicts all, F1 1
    assert best_f1(np.arange(5.0), np.ones(5), adjust, **params).f1 == 1.0
    # single-point events at both ends, perfectly ranked
    labels = np.array([1, 0, 0, 0, 1])
    got = best_f1(np.array([9.0, 1, 2, 3, 8]), labels, adjust, **params)
    assert (got.f1, got.threshold) == (1.0, 8.0)
    # constant scores: one threshold predicts everything, F1 = 2·2/(2·2 + 3)
    assert best_f1(np.ones(5), labels, adjust, **params).f1 == pytest.approx(4 / 7)
    # empty input
    assert best_f1(np.empty(0), np.empty(0), adjust, **params).f1 == 0.0


@pytest.mark.parametrize(
    ("scores", "labels", "kwargs", "needle"),
    [
        ([0.1, np.nan], [0, 1], {}, "scores: NaN and +inf are not allowed, found nan at index 1"),
        ([np.inf, 0.2], [0, 1], {}, "found inf at index 0"),
        ([0.1, 0.2], [0, 1, 1], {}, "scores has 2 values but labels has 3"),
        ([0.1, 0.2], [0, 3], {}, "labels: values must be 0 or 1, found 3 at index 1"),
        ([0.1, 0.2], [0, 1], {"adjust": "pa"}, "adjust: 'pa' is not one of"),
        ([0.1, 0.2], [0, 1], {"adjust": "pa%k"}, "k: adjust='pa%k' needs k"),
        ([0.1, 0.2], [0, 1], {"adjust": "delay"}, "delay: adjust='delay' needs delay"),
        ([0.1, 0.2], [0, 1], {"k": 5}, "k: only used with adjust='pa%k'"),
        ([0.1, 0.2], [0, 1], {"adjust": "point", "delay": 5}, "delay: only used with"),
        ([[0.1, 0.2]], [0, 1], {}, "scores: expected a 1-D array"),
    ],
)
def test_bad_input_raises_one_clear_error(scores, labels, kwargs, needle):
    for search in (best_f1, f1_curve):
        with pytest.raises(MetricInputError) as info:
            search(np.array(scores), np.array(labels), **kwargs)
        assert needle in str(info.value)
        assert "\n" not in str(info.value)
