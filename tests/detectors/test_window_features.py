"""Causal window features against pandas' rolling statistics (an outside reference)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from detectors._features import FEATURE_SETS, subsample_rows, window_features


@pytest.fixture
def series():
    return np.random.default_rng(3).normal(size=(60, 3))


def test_extended_features_match_pandas_rolling(series):
    window, d = 7, series.shape[1]
    rows = window_features(series, window, "extended")
    assert rows.shape == (60 - window + 1, 5 * d)
    roll = pd.DataFrame(series).rolling(window)
    # reference: pandas.DataFrame.rolling (ddof=0 for the population standard deviation)
    expected = [
        series[window - 1 :],
        roll.mean().to_numpy()[window - 1 :],
        roll.std(ddof=0).to_numpy()[window - 1 :],
        roll.min().to_numpy()[window - 1 :],
        roll.max().to_numpy()[window - 1 :],
    ]
    np.testing.assert_allclose(rows, np.hstack(expected), rtol=1e-10, atol=1e-12)


def test_feature_sets_are_prefixes_of_each_other(series):
    point = window_features(series, 4, "point")
    summary = window_features(series, 4, "summary")
    assert point.shape[1] == 3 * len(FEATURE_SETS["point"])
    np.testing.assert_array_equal(summary[:, :3], point)


def test_row_of_step_t_ignores_later_steps(series):
    changed = series.copy()
    changed[30:] += 100.0
    a, b = window_features(series, 5, "extended"), window_features(changed, 5, "extended")
    # row i ends at step i + 4: rows ending before step 30 are unchanged
    np.testing.assert_array_equal(a[: 30 - 4], b[: 30 - 4])
    assert not np.array_equal(a[30 - 4], b[30 - 4])


def test_subsample_rows_is_sorted_unique_and_seeded():
    a = subsample_rows(1000, 50, np.random.default_rng(1))
    b = subsample_rows(1000, 50, np.random.default_rng(1))
    np.testing.assert_array_equal(a, b)
    assert a.size == 50 and np.all(np.diff(a) > 0)
    np.testing.assert_array_equal(subsample_rows(20, 50, np.random.default_rng(1)), np.arange(20))
