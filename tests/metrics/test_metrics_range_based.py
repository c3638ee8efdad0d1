"""Range-based precision and recall (Tatbul et al., NeurIPS 2018)."""

import numpy as np
import pytest
from metrics_cases import random_labels

from benchkit.metrics import MetricInputError, range_precision_recall

BIASES = ("flat", "front", "back", "middle")


def _one_overlap():
    # real range R = [2, 7] (6 points), predicted range P = [5, 9] (5 points), overlap [5, 7]
    labels = np.zeros(12, dtype=np.int8)
    labels[2:8] = 1
    pred = np.zeros(12, dtype=np.int8)
    pred[5:10] = 1
    return pred, labels


@pytest.mark.parametrize(
    ("bias", "recall", "precision"),
    [
        # worked examples from the definitions in Tatbul et al. 2018, computed by hand.
        # recall: overlap is positions 4, 5, 6 of R (L = 6); precision: positions 1, 2, 3 of P
        # (L = 5). flat δ = 1: 3/6 and 3/5
        ("flat", 3 / 6, 3 / 5),
        # front δ(i) = L - i + 1: (3+2+1)/21 and (5+4+3)/15
        ("front", 6 / 21, 12 / 15),
        # back δ(i) = i: (4+5+6)/21 and (1+2+3)/15
        ("back", 15 / 21, 6 / 15),
        # middle δ = i for i <= L/2 else L - i + 1: R weights 1,2,3,3,2,1 -> (3+2+1)/12;
        # P weights 1,2,3,2,1 -> (1+2+3)/9
        ("middle", 6 / 12, 6 / 9),
    ],
)
def test_worked_example_per_bias(bias, recall, precision):
    pred, labels = _one_overlap()
    p, r, f1 = range_precision_recall(pred, labels, bias=bias)
    assert (p, r) == pytest.approx((precision, recall))
    assert f1 == pytest.approx(2 * precision * recall / (precision + recall))


def test_alpha_weights_existence_in_recall_only():
    pred, labels = _one_overlap()
    # by hand: recall = 0.5·1 (existence) + 0.5·(3/6); precision keeps no existence term
    p, r, _ = range_precision_recall(pred, labels, alpha=0.5)
    assert r == pytest.approx(0.75)
    assert p == pytest.approx(3 / 5)
    assert range_precision_recall(pred, labels, alpha=1.0)[:2] == pytest.approx((3 / 5, 1.0))


def test_reciprocal_cardinality_worked_example():
    # by hand: R = [0, 9] overlapped by predictions [1, 2] and [5, 6]: Σω = 4/10 (flat),
    # γ = 1/2 -> recall 0.2 (0.4 with γ = 1); each prediction lies inside R -> precision 1
    labels = np.zeros(12, dtype=np.int8)
    labels[:10] = 1
    pred = np.zeros(12, dtype=np.int8)
    pred[[1, 2, 5, 6]] = 1
    assert range_precision_recall(pred, labels, cardinality="reciprocal")[:2] == pytest.approx(
        (1.0, 0.2)
    )
    assert range_precision_recall(pred, labels, cardinality="one")[:2] == pytest.approx((1.0, 0.4))


@pytest.mark.parametrize(
    ("pred", "labels", "want"),
    [
        ([0, 0, 0, 0], [0, 1, 1, 0], (0.0, 0.0, 0.0)),  # no predictions
        ([1, 1, 0, 0], [0, 0, 0, 0], (0.0, 0.0, 0.0)),  # no events
        ([1, 0, 0, 1], [1, 0, 0, 1], (1.0, 1.0, 1.0)),  # single-point events, exact hits
    ],
)
def test_edge_cases_any_bias(pred, labels, want):
    # by hand from the definitions; a mean over zero ranges is 0
    for bias in BIASES:
        got = range_precision_recall(np.array(pred), np.array(labels), bias=bias)
        assert got == pytest.approx(want)


@pytest.mark.parametrize(("bias", "precision"), [("flat", 2 / 4), ("front", 5 / 10),
                                                 ("back", 5 / 10), ("middle", 2 / 6)])
def test_everything_predicted_with_events_at_both_ends(bias, precision):
    # by hand: one predicted range [0, 3] over real ranges [0, 0] and [3, 3]; its positions 1
    # and 4 overlap: flat 2/4, front (4+1)/10, back (1+4)/10, middle weights 1,2,2,1 -> 2/6.
    # Each real range is wholly covered -> recall 1
    p, r, _ = range_precision_recall(np.ones(4), np.array([1, 0, 0, 1]), bias=bias)
    assert (p, r) == pytest.approx((precision, 1.0))


@pytest.mark.parametrize("seed", range(25))
def test_matches_prts(seed):
    prts = pytest.importorskip(
        "prts", reason="prts (independent Tatbul et al. code) absent: pip install --no-deps prts"
    )
    rng = np.random.default_rng(seed)
    n = int(rng.integers(8, 70))
    labels = random_labels(rng, n)
    pred = random_labels(rng, n)
    labels[rng.integers(n)] = 1  # prts needs at least one point of each
    pred[rng.integers(n)] = 1
    for bias in BIASES:
        for cardinality in ("one", "reciprocal"):
            for alpha in (0.0, 0.5, 1.0):
                p, r, _ = range_precision_recall(pred, labels, alpha, cardinality, bias)
                # reference: prts.ts_recall / prts.ts_precision; prts applies alpha to precision
                # too, the paper does not, so precision is compared at prts' alpha = 0
                want_r = prts.ts_recall(labels, pred, alpha=alpha, cardinality=cardinality,
                                        bias=bias)
                want_p = prts.ts_precision(labels, pred, alpha=0.0, cardinality=cardinality,
                                           bias=bias)
                assert r == pytest.approx(want_r, abs=1e-12)
                assert p == pytest.approx(want_p, abs=1e-12)


@pytest.mark.parametrize(
    ("kwargs", "needle"),
    [
        ({"alpha": 1.5}, "alpha: expected a number from 0 to 1"),
        ({"bias": "centre"}, "bias: 'centre' is not one of flat, front, back, middle"),
        ({"cardinality": "udf"}, "cardinality: 'udf' is not one of one, reciprocal"),
    ],
)
def test_rejects_bad_options(kwargs, needle):
    with pytest.raises(MetricInputError) as info:
        range_precision_recall(np.array([0, 1]), np.array([1, 1]), **kwargs)
    assert needle in str(info.value)
