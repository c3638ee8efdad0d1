"""Events <-> labels."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage

from benchkit.metrics import MetricInputError, events_to_labels, labels_to_events


@pytest.mark.parametrize(
    ("labels", "events"),
    [
        # worked by hand from the inclusive [start, end] convention of docs/internals.md
        ([0, 1, 1, 0, 0, 1, 0], [[1, 2], [5, 5]]),
        ([1, 0, 0, 1], [[0, 0], [3, 3]]),  # events touching both ends
        ([1, 1, 1], [[0, 2]]),  # everything labelled
        ([0, 0, 0], []),  # no events
        ([], []),  # empty series
        ([1], [[0, 0]]),  # single point
    ],
)
def test_labels_to_events_worked_examples(labels, events):
    got = labels_to_events(np.array(labels, dtype=np.int8))
    assert got.dtype == np.int64 and got.shape == (len(events), 2)
    assert got.tolist() == events


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 1), min_size=1, max_size=60))  # scipy.ndimage needs n >= 1
def test_labels_to_events_matches_scipy_label(bits):
    labels = np.array(bits, dtype=np.int8)
    events = labels_to_events(labels)
    # reference: scipy.ndimage.label numbers the connected runs of ones, find_objects gives slices
    _, count = ndimage.label(labels)
    slices = ndimage.find_objects(ndimage.label(labels)[0])
    assert len(events) == count
    assert [[sl[0].start, sl[0].stop - 1] for sl in slices] == events.tolist()
    back = events_to_labels(events, len(labels))
    assert back.dtype == np.int8
    np.testing.assert_array_equal(back, labels)


def test_events_to_labels_overlapping_events_take_the_union():
    # worked by hand: [1,3] ∪ [2,5] covers 1..5
    got = events_to_labels(np.array([[1, 3], [2, 5], [7, 7]]), 9)
    assert got.tolist() == [0, 1, 1, 1, 1, 1, 0, 1, 0]


def test_events_to_labels_accepts_no_events():
    assert events_to_labels(np.empty((0, 2), dtype=np.int64), 3).tolist() == [0, 0, 0]


@pytest.mark.parametrize(
    ("events", "n", "needle"),
    [
        ([[2, 1]], 5, "row 0 is [2, 1]"),
        ([[0, 5]], 5, "end < 5"),
        ([[-1, 0]], 5, "row 0"),
        ([[0, 1, 2]], 5, "(m, 2)"),
        ([[0.0, 1.0]], 5, "integer"),
    ],
)
def test_events_to_labels_rejects_bad_events(events, n, needle):
    with pytest.raises(MetricInputError) as info:
        events_to_labels(np.array(events), n)
    assert needle in str(info.value)


def test_labels_to_events_rejects_non_binary_labels():
    with pytest.raises(MetricInputError, match=r"labels: values must be 0 or 1, found 2 at index"):
        labels_to_events(np.array([0, 1, 2]))
