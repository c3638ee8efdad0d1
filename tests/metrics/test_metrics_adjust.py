"""Point adjustment, PA%K, delay-bounded adjustment and the PA%K area."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from metrics_cases import random_labels

from benchkit.metrics import (
    MetricInputError,
    delay_adjust,
    labels_to_events,
    pa_k_adjust,
    pa_k_f1_auc,
    point_adjust,
    prf,
)
from benchkit.metrics.adjust import pa_k_f1_curve


def test_point_adjust_worked_example():
    # worked example from the definition in Xu et al., WWW 2018, computed by hand:
    # event [1, 3] has a hit at 2 so all of it counts; event [6, 7] has none; 8 stays a FP
    labels = np.array([0, 1, 1, 1, 0, 0, 1, 1, 0])
    pred = np.array([0, 0, 1, 0, 0, 0, 0, 0, 1])
    got = point_adjust(pred, labels)
    assert got.astype(int).tolist() == [0, 1, 1, 1, 0, 0, 0, 0, 1]
    assert prf(got, labels) == pytest.approx((3 / 4, 3 / 5, 2 / 3))


@pytest.mark.parametrize(("k", "adjusted"), [(0, True), (20, True), (29, True), (30, False),
                                             (100, False)])
def test_pa_k_adjusts_only_above_k_percent(k, adjusted):
    # worked example from the definition in Kim et al., AAAI 2022, computed by hand:
    # 3 of 10 points detected = 30 %, adjusted only when strictly above K %
    labels = np.ones(10, dtype=np.int8)
    pred = np.zeros(10, dtype=np.int8)
    pred[[2, 5, 7]] = 1
    got = pa_k_adjust(pred, labels, k)
    want = np.ones(10, dtype=bool) if adjusted else pred.astype(bool)
    np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("seed", range(10))
def test_pa_k_extremes_are_point_adjust_and_point_wise(seed):
    # K = 0 is plain point adjustment and K = 100 is point-wise (Kim et al., 2022, Sec. 4)
    rng = np.random.default_rng(seed)
    labels = random_labels(rng, 80)
    pred = rng.random(80) < 0.3
    np.testing.assert_array_equal(pa_k_adjust(pred, labels, 0), point_adjust(pred, labels))
    np.testing.assert_array_equal(pa_k_adjust(pred, labels, 100), pred)


@pytest.mark.parametrize(
    ("hit", "caught"),
    [(2, True), (5, True), (6, False), (9, False)],
)
def test_delay_adjust_counts_detection_within_delay_steps(hit, caught):
    # worked by hand from the delay-bounded rule (an event counts when detected at most `delay`
    # steps after its start, then wholly; otherwise none of it): event [2, 9], delay 3
    labels = np.zeros(12, dtype=np.int8)
    labels[2:10] = 1
    pred = np.zeros(12, dtype=np.int8)
    pred[[hit, 11]] = 1
    got = delay_adjust(pred, labels, 3)
    want = np.zeros(12, dtype=bool)
    want[11] = True  # false positives are untouched
    if caught:
        want[2:10] = True
    np.testing.assert_array_equal(got, want)


def test_delay_zero_needs_the_first_point():
    labels = np.array([0, 1, 1, 0, 1, 1])
    pred = np.array([0, 1, 0, 0, 0, 1])
    # by hand: event [1,2] caught at its first point; event [4,5] only at offset 1 -> dropped
    assert delay_adjust(pred, labels, 0).astype(int).tolist() == [0, 1, 1, 0, 0, 0]


@pytest.mark.parametrize("adjust", [point_adjust, lambda p, y: pa_k_adjust(p, y, 50),
                                    lambda p, y: delay_adjust(p, y, 2)])
def test_adjustments_edge_cases(adjust):
    # by hand: events touching both ends, single-point events, nothing / everything predicted
    labels = np.array([1, 0, 0, 1, 1, 0, 1])
    nothing = np.zeros(7, dtype=int)
    everything = np.ones(7, dtype=int)
    assert not adjust(nothing, labels).any()
    assert adjust(everything, labels).all()
    assert adjust(np.array([1, 0, 0, 0, 0, 0, 1]), labels).astype(int).tolist() == [
        1, 0, 0, 0, 0, 0, 1
    ]
    no_events = np.zeros(7, dtype=int)
    pred = np.array([0, 1, 0, 1, 0, 0, 0])
    np.testing.assert_array_equal(adjust(pred, no_events), pred.astype(bool))


def test_pa_k_f1_auc_worked_example():
    # worked by hand: one event of 4 points with 1 detected (25 %), no false positives.
    # F1 = 1 for K = 0..24 and 2·1/(2·1 + 3) = 0.4 for K = 25..100; trapezoids over
    # K = 0..100: 24·1 + (1 + 0.4)/2 + 75·0.4 = 54.7, divided by 100
    labels = np.array([0, 1, 1, 1, 1, 0])
    pred = np.array([0, 0, 1, 0, 0, 0])
    assert pa_k_f1_auc(pred, labels) == pytest.approx(0.547)


@pytest.mark.parametrize("seed", range(8))
def test_pa_k_f1_curve_equals_f1_of_each_adjustment(seed):
    rng = np.random.default_rng(seed)
    labels = random_labels(rng, 120)
    pred = rng.random(120) < 0.25
    ks, f1 = pa_k_f1_curve(pred, labels)
    want = [prf(pa_k_adjust(pred, labels, k), labels)[2] for k in range(101)]
    np.testing.assert_allclose(f1, want, rtol=0, atol=1e-12)
    # reference: numpy.trapezoid for the area, divided by 100
    assert pa_k_f1_auc(pred, labels) == pytest.approx(np.trapezoid(want, np.arange(101)) / 100)
    assert 0.0 <= pa_k_f1_auc(pred, labels) <= 1.0


def test_pa_k_f1_auc_custom_ks_is_mean_over_their_span():
    labels = np.array([0, 1, 1, 1, 1, 0])
    pred = np.array([0, 0, 1, 0, 0, 0])
    # by hand: over K in {0, 20, 40}: F1 = 1, 1, 0.4; trapezoids 20 + 14 = 34, span 40
    assert pa_k_f1_auc(pred, labels, ks=[0, 20, 40]) == pytest.approx(34 / 40)


@pytest.mark.parametrize(
    ("call", "needle"),
    [
        (lambda p, y: pa_k_adjust(p, y, 101), "k: expected a number from 0 to 100"),
        (lambda p, y: pa_k_adjust(p, y, -1), "k: expected"),
        (lambda p, y: delay_adjust(p, y, -2), "delay: expected an integer >= 0"),
        (lambda p, y: delay_adjust(p, y, 1.5), "delay: expected an integer >= 0"),
        (lambda p, y: pa_k_f1_auc(p, y, ks=[0]), "ks: expected at least two"),
        (lambda p, y: pa_k_f1_auc(p, y, ks=[0, 150]), "ks: values must lie within 0 to 100"),
        (lambda p, y: point_adjust(p[:-1], y), "pred has 3 values but labels has 4"),
    ],
)
def test_adjust_rejects_bad_parameters(call, needle):
    with pytest.raises(MetricInputError) as info:
        call(np.array([0, 1, 0, 1]), np.array([0, 1, 1, 0]))
    assert needle in str(info.value)


def _by_definition(pred, labels, rule):
    """Adjust event by event, straight from the definitions (slow loop, for reference)."""
    out = pred.astype(bool).copy()
    for start, end in labels_to_events(labels):
        keep = rule(pred[start : end + 1].astype(bool))
        out[start : end + 1] = keep if keep is not None else out[start : end + 1]
    return out


@settings(max_examples=80, deadline=None)
@given(
    bits=st.lists(st.tuples(st.integers(0, 1), st.integers(0, 1)), min_size=1, max_size=50),
    k=st.floats(0, 100),
    delay=st.integers(0, 6),
)
def test_vectorised_adjustments_equal_the_definitions(bits, k, delay):
    labels = np.array([b[0] for b in bits])
    pred = np.array([b[1] for b in bits])
    # reference: Xu et al. 2018 (any hit), Kim et al. 2022 (hit share strictly above K %),
    # and the delay rule (a hit among the first delay + 1 points, else the event is dropped)
    want_pa = _by_definition(pred, labels, lambda hit: True if hit.any() else None)
    want_pak = _by_definition(pred, labels,
                              lambda hit: True if hit.sum() * 100 > k * len(hit) else None)
    want_delay = _by_definition(pred, labels, lambda hit: bool(hit[: delay + 1].any()))
    np.testing.assert_array_equal(point_adjust(pred, labels), want_pa)
    np.testing.assert_array_equal(pa_k_adjust(pred, labels, k), want_pak)
    np.testing.assert_array_equal(delay_adjust(pred, labels, delay), want_delay)
