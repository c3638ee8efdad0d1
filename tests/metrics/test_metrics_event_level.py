"""Event recall, composite F1 and detection delays."""

import math

import numpy as np
import pytest

from benchkit.metrics import composite_f1, detection_delays, event_recall


def _case():
    labels = np.zeros(14, dtype=np.int8)
    labels[1:4] = 1  # event [1, 3]
    labels[6:8] = 1  # event [6, 7]
    labels[9:13] = 1  # event [9, 12]
    return labels


def test_event_recall_counts_each_event_once():
    labels = _case()
    pred = np.zeros(14, dtype=np.int8)
    pred[[1, 2, 3, 12]] = 1
    # by hand: events [1,3] and [9,12] detected, [6,7] missed -> 2/3
    assert event_recall(pred, labels) == pytest.approx(2 / 3)


def test_composite_f1_worked_example():
    # worked example from the definition in Garg et al., IEEE TNNLS 2021 (harmonic mean of
    # point-wise precision and event-wise recall), computed by hand:
    # TP points 2, 3; FP point 5 -> P = 2/3; one of three events detected -> R_e = 1/3;
    # F_c = 2·(2/3)·(1/3) / (2/3 + 1/3) = 4/9
    labels = _case()
    pred = np.zeros(14, dtype=np.int8)
    pred[[2, 3, 5]] = 1
    assert composite_f1(pred, labels) == pytest.approx(4 / 9)


def test_detection_delays_worked_example():
    labels = _case()
    pred = np.zeros(14, dtype=np.int8)
    pred[[0, 2, 7, 12, 13]] = 1
    # by hand: first predicted point at offsets 1 ([1,3] at 2), 1 ([6,7] at 7), 3 ([9,12] at 12);
    # the false positives at 0 and 13 do not count
    mean, median = detection_delays(pred, labels)
    assert mean == pytest.approx(5 / 3)
    assert median == 1.0


def test_delay_zero_when_the_first_point_is_predicted():
    labels = np.array([1, 1, 0, 0, 1])
    pred = np.array([1, 0, 0, 0, 1])  # events at both ends, caught at their first point
    assert detection_delays(pred, labels) == (0.0, 0.0)


@pytest.mark.parametrize(
    ("pred", "labels"),
    [
        ([0, 0, 0, 0], [0, 1, 1, 0]),  # no predictions
        ([1, 0, 0, 1], [0, 1, 1, 0]),  # predictions outside the events only
        ([1, 1, 1, 1], [0, 0, 0, 0]),  # no events
    ],
)
def test_nothing_detected(pred, labels):
    pred, labels = np.array(pred), np.array(labels)
    mean, median = detection_delays(pred, labels)
    assert math.isnan(mean) and math.isnan(median)
    assert event_recall(pred, labels) == 0.0
    assert composite_f1(pred, labels) == 0.0


def test_everything_predicted_single_point_events():
    labels = np.array([1, 0, 1, 0, 1])
    pred = np.ones(5, dtype=np.int8)
    # by hand: every event detected at offset 0; precision 3/5, event recall 1 -> F_c = 3/4
    assert event_recall(pred, labels) == 1.0
    assert composite_f1(pred, labels) == pytest.approx(0.75)
    assert detection_delays(pred, labels) == (0.0, 0.0)
