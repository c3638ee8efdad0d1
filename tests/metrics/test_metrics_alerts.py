"""Alerts: count_alerts by hand, and the exact alert curve against a brute-force loop.

Common practice, no source: operators judge a detector by the false alerts per day it pages
someone with and by how soon it catches an incident; these tests check our counting of those
alerts, defined in benchkit.metrics.alerts (an alert is a maximal run of predicted points, runs
at most ``merge_gap`` unpredicted steps apart merge, and an alert whose span overlaps a labelled
event is true).
"""

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchkit.metrics import (
    ALERT_METRICS,
    MetricInputError,
    alert_curve,
    alert_metrics,
    count_alerts,
    event_recall,
    labels_to_events,
)
from benchkit.metrics.alerts import window_max_before
from benchkit.metrics.coded_sort import ascending_order, sorted_with_codes


def _brute_count(pred, labels, gap):
    """Reference by a plain loop over steps: open an alert at a predicted step, extend it while
    the next predicted step is at most ``gap`` unpredicted steps away, then look at its span."""
    predicted = [t for t, p in enumerate(pred) if p]
    true = false = 0
    i = 0
    while i < len(predicted):
        j = i
        while j + 1 < len(predicted) and predicted[j + 1] - predicted[j] - 1 <= gap:
            j += 1
        span = labels[predicted[i] : predicted[j] + 1]
        if any(span):
            true += 1
        else:
            false += 1
        i = j + 1
    return true, false


# Hand-worked (common practice, no source): labels   0 0 1 1 0 0 0 0 1 0
#                                          pred     1 0 0 1 1 0 1 1 0 0
# alerts without merging: [0], [3..4], [6..7]; [3..4] overlaps the first event -> 1 true, 2 false.
# with merge_gap=1: [0] and [3..4] are 2 steps apart (stay apart); [3..4] and [6..7] are 1 step
# apart -> [3..7], which overlaps the events at 2..3 and 8? no, 3..7 overlaps 2..3 -> 1 true,
# 1 false ([0]). With merge_gap=2: [0..7] is one alert -> 1 true, 0 false.
LABELS = np.array([0, 0, 1, 1, 0, 0, 0, 0, 1, 0])
PRED = np.array([1, 0, 0, 1, 1, 0, 1, 1, 0, 0])


@pytest.mark.parametrize(("gap", "want"), [(0, (1, 2)), (1, (1, 1)), (2, (1, 0)), (9, (1, 0))])
def test_count_alerts_hand_worked(gap, want):
    assert count_alerts(PRED, LABELS, merge_gap=gap) == want


def test_count_alerts_straddling_alert_is_true():
    # Hand-worked: the runs at 1 and 5 merge with merge_gap=3 into the span [1..5], which
    # contains the event at 3 although no predicted step is inside it.
    labels = np.array([0, 0, 0, 1, 0, 0, 0])
    pred = np.array([0, 1, 0, 0, 0, 1, 0])
    assert count_alerts(pred, labels, merge_gap=3) == (1, 0)
    assert count_alerts(pred, labels, merge_gap=2) == (0, 2)


def test_count_alerts_edges():
    assert count_alerts(np.zeros(5), np.zeros(5)) == (0, 0)
    assert count_alerts(np.ones(5), np.zeros(5)) == (0, 1)
    assert count_alerts(np.ones(5), np.ones(5)) == (1, 0)
    assert count_alerts([], []) == (0, 0)


@pytest.mark.parametrize("bad", [-1, 1.5, True, "2"])
def test_merge_gap_must_be_a_non_negative_integer(bad):
    with pytest.raises(MetricInputError, match="merge_gap"):
        count_alerts(PRED, LABELS, merge_gap=bad)
    with pytest.raises(MetricInputError, match="merge_gap"):
        alert_curve(PRED.astype(float), LABELS, merge_gap=bad)


@st.composite
def cases(draw):
    n = draw(st.integers(1, 40))
    labels = np.array(draw(st.lists(st.integers(0, 1), min_size=n, max_size=n)), dtype=np.int8)
    if draw(st.booleans()):  # ties: few distinct values
        values = st.one_of(st.integers(0, 7).map(float), st.just(-math.inf))
    else:  # mostly distinct values (the path where every level is used once)
        values = st.one_of(st.floats(-1e3, 1e3, allow_nan=False), st.just(-math.inf))
    scores = np.array(draw(st.lists(values, min_size=n, max_size=n)), dtype=np.float64)
    return scores, labels, draw(st.integers(0, 5))


@settings(max_examples=150, deadline=None)
@given(case=cases())
def test_alert_curve_equals_brute_force_at_every_threshold(case):
    scores, labels, gap = case
    curve = alert_curve(scores, labels, merge_gap=gap)
    # reference: every distinct finite score, thresholded one by one (common practice, no source)
    want = np.unique(scores[np.isfinite(scores)])[::-1]
    np.testing.assert_array_equal(curve.thresholds, want)
    for i, theta in enumerate(want):
        pred = (scores >= theta).astype(np.int8)
        assert curve.false_alerts[i] == _brute_count(pred, labels, gap)[1]
        assert count_alerts(pred, labels, gap) == _brute_count(pred, labels, gap)
        assert curve.event_recall[i] == pytest.approx(event_recall(pred, labels), abs=1e-12)


def test_alert_curve_on_long_random_series_matches_brute_force():
    rng = np.random.default_rng(7)
    n = 1500
    labels = (rng.random(n) < 0.01).astype(np.int8)
    labels = np.maximum.reduce([np.roll(labels, k) for k in range(6)])  # events of ~6 steps
    scores = np.round(rng.normal(size=n) + labels, 1)
    for gap in (0, 3, 17):
        curve = alert_curve(scores, labels, gap)
        for i in range(0, len(curve.thresholds), 3):
            pred = scores >= curve.thresholds[i]
            assert curve.false_alerts[i] == _brute_count(pred, labels, gap)[1]
    assert len(labels_to_events(labels)) > 10


def test_alert_curve_without_events_or_thresholds():
    curve = alert_curve([3.0, 1.0, 3.0, 2.0], [0, 0, 0, 0])
    np.testing.assert_array_equal(curve.thresholds, [3.0, 2.0, 1.0])
    # hand-worked: >= 3 predicts 1 0 1 0 (2 alerts), >= 2 predicts 1 0 1 1 (2), >= 1 all (1)
    np.testing.assert_array_equal(curve.false_alerts, [2, 2, 1])
    np.testing.assert_array_equal(curve.event_recall, [0.0, 0.0, 0.0])
    empty = alert_curve([-math.inf, -math.inf], [0, 1])
    assert len(empty.thresholds) == len(empty.false_alerts) == len(empty.event_recall) == 0


def _ulp_apart(base: float, count: int) -> np.ndarray:
    """``count`` consecutive doubles from ``base`` upwards (each one ulp above the last)."""
    values = [base]
    for _ in range(count - 1):
        values.append(np.nextafter(values[-1], np.inf))
    return np.array(values)


@pytest.mark.parametrize("base", [1.0, -2.5, 0.0, 1e300, -1e-300, 5e-324, -np.finfo(float).max])
@pytest.mark.parametrize("levels", [9, 3000])
def test_order_is_exact_for_scores_few_ulps_apart(base, levels):
    # Scores that differ only in their last bits (the bits the sort key gives to the step's
    # index), ties, -inf and -0.0 must still come out in exact order; reference: numpy's sort.
    # With 3000 levels whole runs of keys collide, so the repair has to widen its windows.
    rng = np.random.default_rng(3)
    scores = _ulp_apart(base, levels)[rng.integers(0, levels, 5000)]
    scores[rng.random(5000) < 0.05] = -np.inf
    scores[rng.random(5000) < 0.02] = -0.0
    codes = rng.integers(0, 4, 5000).astype(np.int8)
    order, ascending, carried, ties = ascending_order(scores, codes)
    np.testing.assert_array_equal(np.sort(order), np.arange(5000))  # a permutation
    np.testing.assert_array_equal(ascending, np.sort(scores))
    np.testing.assert_array_equal(scores[order], ascending)
    np.testing.assert_array_equal(carried, codes[order])  # each code moved with its step
    np.testing.assert_array_equal(ties, np.flatnonzero(ascending[1:] == ascending[:-1]))


@pytest.mark.parametrize("kind", ["normal", "integers", "zeros"])
def test_two_sorts_agree_with_the_sort_that_carries_the_index(kind):
    # The fast path (two sorts, no gather) must give the same sorted scores, the same ties and
    # the same codes in each run of equal scores as the exact reference path; reference for
    # the scores themselves: numpy's sort.
    rng = np.random.default_rng(8)
    n = 3000
    if kind == "normal":
        scores = rng.normal(size=n)
    elif kind == "integers":
        scores = rng.integers(-3, 4, n).astype(float)
    else:
        scores = rng.choice([0.0, -0.0, 1.5, -2.0], n)
    scores[rng.random(n) < 0.05] = -np.inf
    codes = rng.integers(0, 4, n).astype(np.int8)
    fast = sorted_with_codes(scores, codes)
    assert fast is not None
    ascending, carried, tied = fast
    _, want_ascending, want_carried, want_ties = ascending_order(scores, codes)
    np.testing.assert_array_equal(ascending, np.sort(scores))
    np.testing.assert_array_equal(np.flatnonzero(tied), want_ties)
    # The fast path gives the codes highest score first, and only the finite scores' codes
    # count (-inf is never predicted; a sort may rewrite the keys that -inf becomes). Compare
    # the sums from the top, read at the end of each run of equal scores.
    finite = int(np.isfinite(scores).sum())
    descending = ascending[::-1][:finite]
    ends = np.flatnonzero(np.append(descending[1:] != descending[:-1], True))
    np.testing.assert_array_equal(
        np.cumsum(carried[:finite])[ends], np.cumsum(want_carried[::-1][:finite])[ends]
    )


def test_two_sorts_step_aside_where_they_would_not_be_exact():
    # distinct scores that differ only in the lowest two bits share a key; a subnormal next to
    # zero shares a key with 0.0 or -0.0: both must fall back to the exact path
    codes = np.zeros(4, dtype=np.int8)
    clash = np.array([1.0, np.nextafter(1.0, 2.0), 3.0, 1.0])
    assert sorted_with_codes(clash, codes) is None
    near_zero = np.array([0.0, 5e-324, 1.0, 2.0])
    assert sorted_with_codes(near_zero, codes) is None
    assert sorted_with_codes(np.array([0.0, 1e-300, 1.0, 2.0]), codes) is not None


@pytest.mark.parametrize("gap", [0, 4])
def test_alert_curve_on_scores_few_ulps_apart_matches_brute_force(gap):
    rng = np.random.default_rng(11)
    n = 400
    labels = (rng.random(n) < 0.03).astype(np.int8)
    labels = np.maximum(labels, np.roll(labels, 1))
    scores = _ulp_apart(0.75, 40)[rng.integers(0, 40, n)]
    curve = alert_curve(scores, labels, gap)
    np.testing.assert_array_equal(curve.thresholds, np.unique(scores)[::-1])
    for i, theta in enumerate(curve.thresholds):
        pred = scores >= theta
        assert curve.false_alerts[i] == _brute_count(pred, labels, gap)[1]
        assert curve.event_recall[i] == pytest.approx(event_recall(pred, labels), abs=1e-12)


def test_negative_zero_is_zero():
    # IEEE 754: -0.0 == 0.0, so they are one threshold (reference: numpy.unique); hand-worked
    # false alerts without events: >= 1 predicts step 2 (1 alert), >= 0 steps 0..3 (1 alert),
    # >= -1 everything (1 alert).
    curve = alert_curve(np.array([0.0, -0.0, 1.0, -0.0, -1.0]), np.zeros(5, dtype=int))
    np.testing.assert_array_equal(curve.thresholds, [1.0, 0.0, -1.0])
    np.testing.assert_array_equal(curve.false_alerts, [1, 1, 1])


def test_window_max_before_against_a_loop():
    # reference: the definition, max over the `width` steps before i (-inf outside), by loop
    rng = np.random.default_rng(5)
    values = rng.normal(size=60)
    for width in (1, 2, 3, 7, 8, 13, 70):
        got = window_max_before(values, width)
        want = [max(values[max(i - width, 0) : i], default=-np.inf) for i in range(60 + width)]
        np.testing.assert_array_equal(got, want)


def test_alert_metrics_hand_worked():
    # Hand-worked on LABELS / PRED above with a 5-minute step (common practice, no source):
    # 1 true and 2 false alerts over 10 steps = 3000 s = 1/28.8 day -> 57.6 false alerts a day
    # and 200 per 1,000 steps; the event at 2..3 is caught at 3 (1 step = 5 min late), the one
    # at 8 is missed; one alert overlaps the caught event.
    got = alert_metrics(PRED, LABELS, merge_gap=0, step_seconds=300.0)
    assert got["true_alerts"] == 1 and got["false_alerts"] == 2
    assert got["false_alerts_per_day"] == pytest.approx(57.6)
    assert got["false_alerts_per_1k_steps"] == pytest.approx(200.0)
    assert got["ttd_median_steps"] == 1 and got["ttd_p90_steps"] == 1
    assert got["ttd_median_minutes"] == 5 and got["ttd_p90_minutes"] == 5
    assert got["alerts_per_detected_event"] == 1
    assert set(got) == set(ALERT_METRICS)


def test_alert_metrics_fragmentation_percentile_and_unknown_step():
    # Hand-worked: one event 0..9 hit by three separate alerts (fragmented), a second event
    # 20..29 first predicted at 24; delays 0 and 4 -> median 2, 90th percentile 3.6 (numpy's
    # linear interpolation); alerts per detected event = (3 + 1) / 2.
    labels = np.zeros(40, dtype=int)
    labels[0:10] = labels[20:30] = 1
    pred = np.zeros(40, dtype=int)
    pred[[0, 3, 6, 24, 25]] = 1
    got = alert_metrics(pred, labels)
    assert got["ttd_median_steps"] == 2 and got["ttd_p90_steps"] == pytest.approx(3.6)
    assert got["alerts_per_detected_event"] == 2
    assert math.isnan(got["false_alerts_per_day"]) and math.isnan(got["ttd_median_minutes"])
    assert got["false_alerts_per_1k_steps"] == 0
    nothing = alert_metrics(np.zeros(40, dtype=int), labels)
    assert math.isnan(nothing["ttd_median_steps"])
    assert math.isnan(nothing["alerts_per_detected_event"])
