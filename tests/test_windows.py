"""Sliding windows and train-fitted scalers (benchkit.windows) against numpy and scikit-learn."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.lib.stride_tricks import sliding_window_view
from sklearn.preprocessing import MinMaxScaler, StandardScaler

from benchkit.windows import Scaler, constant_in_train, handle_constant_channels, sliding_windows


def _reference(series: np.ndarray, window: int, stride: int) -> np.ndarray:
    # reference: numpy's sliding_window_view over time, reordered to (n_windows, window, d)
    return sliding_window_view(series, window, axis=0).transpose(0, 2, 1)[::stride]


@settings(max_examples=60, deadline=None)
@given(
    n=st.integers(1, 40),
    d=st.integers(1, 4),
    window=st.integers(1, 45),
    stride=st.integers(1, 5),
)
def test_windows_equal_numpy_sliding_window_view(n, d, window, stride):
    series = np.arange(n * d, dtype=np.float64).reshape(n, d)
    views = sliding_windows(series, window, stride)
    if window > n:
        assert views.shape == (0, window, d)
        return
    expected = _reference(series, window, stride)
    assert views.shape == expected.shape
    np.testing.assert_array_equal(views, expected)


def test_windows_are_read_only_views_sharing_memory():
    series = np.random.default_rng(0).normal(size=(100, 3))
    views = sliding_windows(series, 10, 2)
    assert np.shares_memory(views, series)
    assert views.base is not None and not views.flags.writeable
    series[12, 1] = 99.0  # a change in the series shows through every window covering step 12
    assert views[2, 8, 1] == 99.0 and views[6, 0, 1] == 99.0  # windows 4..13 and 12..21
    with pytest.raises(ValueError):
        views[0, 0, 0] = 1.0


def test_windows_work_on_a_column_slice_without_copying():
    base = np.random.default_rng(1).normal(size=(50, 6))
    part = base[:, 1:4]  # non-contiguous rows
    views = sliding_windows(part, 5)
    assert np.shares_memory(views, base)
    np.testing.assert_array_equal(views, _reference(part, 5, 1))


def test_windows_reject_bad_arguments():
    with pytest.raises(ValueError, match="2-D"):
        sliding_windows(np.zeros(5), 2)
    with pytest.raises(ValueError, match=">= 1"):
        sliding_windows(np.zeros((5, 1)), 0)


@pytest.fixture
def train_test():
    rng = np.random.default_rng(4)
    train = rng.normal(loc=[1.0, -3.0, 10.0], scale=[2.0, 0.5, 4.0], size=(300, 3))
    test = rng.normal(loc=[5.0, 0.0, 10.0], scale=[1.0, 3.0, 1.0], size=(200, 3))
    return train, test


@pytest.mark.parametrize(
    ("method", "reference"), [("zscore", StandardScaler), ("minmax", MinMaxScaler)]
)
def test_scaler_fitted_on_train_only_matches_scikit_learn(train_test, method, reference):
    train, test = train_test
    ours = Scaler(method).fit(train)
    # reference: scikit-learn's StandardScaler / MinMaxScaler fitted on the train part
    ref = reference().fit(train)
    np.testing.assert_allclose(ours.transform(test), ref.transform(test), rtol=1e-12, atol=1e-12)
    # fitted on train only: refitting on train + test would give different numbers
    both = Scaler(method).fit(np.vstack([train, test]))
    assert not np.allclose(both.transform(test), ours.transform(test))


@pytest.mark.parametrize(
    ("method", "reference"), [("zscore", StandardScaler), ("minmax", MinMaxScaler)]
)
def test_scaler_constant_channel_is_safe(method, reference):
    train = np.column_stack([np.linspace(0, 1, 50), np.full(50, 7.0)])
    test = np.column_stack([np.linspace(0, 2, 20), np.full(20, 8.0)])
    scaler = Scaler(method).fit(train)
    out = scaler.transform(test)
    assert np.isfinite(out).all()
    np.testing.assert_array_equal(scaler.constant_, [False, True])
    # reference: scikit-learn leaves a zero-spread feature unscaled (scale 1): 8 - 7 = 1
    np.testing.assert_allclose(out, reference().fit(train).transform(test), atol=1e-12)
    np.testing.assert_allclose(out[:, 1], 1.0)


def test_scaler_none_and_unknown():
    x = np.arange(6.0).reshape(3, 2)
    np.testing.assert_array_equal(Scaler("none").fit_transform(x), x)
    with pytest.raises(ValueError, match="unknown scaling"):
        Scaler("robust")


def test_constant_channels_keep_drop_clip_on_the_public_data_facts():
    # reference: the public data README says some KPIs are constant over train but move in test;
    # this invented pair has channel 1 constant in train and moving in test, channel 0 varying.
    train = np.column_stack([np.arange(10.0), np.full(10, 3.0)])
    test = np.column_stack([np.arange(10.0, 15.0), np.array([3.0, 4.0, 3.0, 9.0, 3.0])])
    assert constant_in_train(train).tolist() == [False, True]
    kept_train, kept_test, kept = handle_constant_channels(train, test, "keep")
    assert kept_train is train and kept_test is test and kept.tolist() == [0, 1]
    dropped_train, dropped_test, kept = handle_constant_channels(train, test, "drop")
    np.testing.assert_array_equal(dropped_train, train[:, [0]])
    np.testing.assert_array_equal(dropped_test, test[:, [0]])
    assert kept.tolist() == [0]
    _, clipped, _ = handle_constant_channels(train, test, "clip")
    # reference: numpy.clip into each channel's train range, written out by hand
    np.testing.assert_array_equal(clipped, [[9, 3], [9, 3], [9, 3], [9, 3], [9, 3]])
    with pytest.raises(ValueError, match="constant_channels"):
        handle_constant_channels(train, test, "zero")
    with pytest.raises(ValueError, match="leaves no input"):
        handle_constant_channels(train[:, [1]], test[:, [1]], "drop")
