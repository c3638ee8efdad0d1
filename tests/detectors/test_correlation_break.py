"""correlation-break: rolling correlations against pandas, and a decoupling KPI that stays in
its normal range (invented data, for a behaviour check)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import roc_auc_score

import detectors.correlation_break as cb
from benchkit import registry


def test_rolling_fisher_z_matches_pandas_rolling_corr(monkeypatch):
    monkeypatch.setattr(cb, "_CHUNK_ELEMENTS", 300)  # several chunks, to cross their borders
    rng = np.random.default_rng(4)
    series = rng.normal(size=(120, 5)) + np.linspace(0, 3, 120)[:, None] * rng.normal(size=5)
    first, second = np.triu_indices(5, k=1)
    z = np.empty((120 - 20 + 1, first.size))
    for start, block in cb.rolling_fisher_z(series, 20, first, second):
        z[:, start : start + block.shape[1]] = block
    frame = pd.DataFrame(series)
    for p, (i, j) in enumerate(zip(first, second, strict=True)):
        # reference: pandas Series.rolling(...).corr, then Fisher's z = artanh(r)
        r = frame[i].rolling(20).corr(frame[j]).to_numpy()[19:]
        np.testing.assert_allclose(z[:, p], np.arctanh(r), rtol=1e-8, atol=1e-8)


def test_flat_window_counts_as_no_correlation():
    series = np.random.default_rng(0).normal(size=(50, 2))
    series[10:30, 1] = 2.0
    (_, z), = cb.rolling_fisher_z(series, 8, np.array([0]), np.array([1]))
    assert np.all(z[10 + 7 - 7 : 30 - 7, 0] == 0.0)  # windows ending in steps 17..29 are flat
    assert np.isfinite(z).all()


def _coupled(n, rng, d=6):
    t = np.arange(n)[:, None]
    latent = np.hstack([np.sin(2 * np.pi * t / 120.0), np.sin(2 * np.pi * t / 37.0 + 1.0)])
    mixing = np.abs(rng.normal(size=(2, d))) + 0.5
    return latent @ mixing + 0.3 * rng.normal(size=(n, d))


@pytest.mark.parametrize("reduce", ["channel-max", "pair-mean"])
def test_catches_a_kpi_that_decouples_inside_its_normal_range(reduce):
    rng = np.random.default_rng(8)
    train, test = _coupled(3000, rng), _coupled(1500, rng)
    mean, std = train.mean(axis=0), train.std(axis=0)
    train, test = (train - mean) / std, (test - mean) / std
    # channel 2 turns into noise with its usual spread: no value leaves its training range
    low, high = train[:, 2].min(), train[:, 2].max()
    test[700:900, 2] = rng.normal(0.0, 1.0, size=200).clip(low, high)
    det = registry.create("correlation-break", window=30, reduce=reduce).fit(train)
    scores = det.score(test)
    labels = np.zeros(1500, dtype=int)
    labels[720:900] = 1  # from the first window mostly inside the incident
    # reference: sklearn.metrics.roc_auc_score
    assert roc_auc_score(labels[29:], scores[29:]) >= 0.95


def test_long_wide_series_in_chunks_equals_one_chunk(monkeypatch):
    rng = np.random.default_rng(1)
    train, test = rng.normal(size=(400, 12)), rng.normal(size=(300, 12))
    whole = registry.create("correlation-break", window=10).fit(train).score(test)
    monkeypatch.setattr(cb, "_CHUNK_ELEMENTS", 1000)
    chunked = registry.create("correlation-break", window=10).fit(train).score(test)
    np.testing.assert_allclose(chunked, whole, rtol=1e-12)
