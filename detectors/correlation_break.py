"""Correlation-break detector: rolling pairwise correlations against the training structure.

For every pair of channels (i, j), the Pearson correlation r over the causal window ending at t
is computed from rolling sums (prefix sums, no per-step loop) and mapped to Fisher's
``z = artanh(r)``. Training gives, per pair, a robust centre ``m`` (median of z over all training
windows) and spread ``s`` (1.4826 × MAD, floored). A step's departure on a pair is
``e = min(|z - m| / s, cap)``: dividing by the training spread weights pairs that were stable in
training above pairs that wandered. Pairs are further weighted by their training strength
``w = tanh(m)² + base_weight``, so that a KPI decoupling from strongly coupled partners stands
out even when it stays inside its normal range.

``reduce = "channel-max"`` (default) scores each channel by the w-weighted mean departure over
its pairs and takes the largest; ``"pair-mean"`` takes the w-weighted mean over all pairs.
A window in which a channel is constant has no correlation; it counts as r = 0.
"""

from __future__ import annotations

import numpy as np

from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series
from benchkit.persist import SavesArrays
from benchkit.registry import register

_R_CLIP = 0.999  # |r| is clipped below 1 so Fisher's z stays finite
_CHUNK_ELEMENTS = 1 << 22  # (steps x pairs) per chunk of product sums, about 32 MB


def _window_sums(values: np.ndarray, window: int) -> np.ndarray:
    """Sums over every window of ``window`` consecutive rows, from prefix sums."""
    prefix = np.zeros((values.shape[0] + 1,) + values.shape[1:])
    np.cumsum(values, axis=0, out=prefix[1:])
    return prefix[window:] - prefix[:-window]


def rolling_fisher_z(series: np.ndarray, window: int, first: np.ndarray, second: np.ndarray):
    """Fisher z of the correlation of channel pairs over each causal window, chunk by chunk.

    Parameters
    ----------
    series : (n, d) float64 array, n >= window.
    window : window length (>= 3).
    first, second : (P,) channel indices of the pairs.

    Yields
    ------
    (start, z) with z of shape (n - window + 1, chunk) for pairs ``start .. start + chunk - 1``;
    row i belongs to the window ending at step ``i + window - 1``.
    """
    x = series - series[0]  # a causal shift (the first row) that keeps the prefix sums small
    mean = _window_sums(x, window) / window
    var = np.maximum(_window_sums(x * x, window) / window - mean * mean, 0.0)
    scale = np.maximum(1.0, np.abs(mean))
    flat = var <= 1e-12 * scale * scale
    rows = max(1, x.shape[0])
    chunk = max(1, _CHUNK_ELEMENTS // rows)
    for start in range(0, first.size, chunk):
        i, j = first[start : start + chunk], second[start : start + chunk]
        cov = _window_sums(x[:, i] * x[:, j], window) / window - mean[:, i] * mean[:, j]
        denom = np.sqrt(var[:, i] * var[:, j])
        undefined = flat[:, i] | flat[:, j]
        r = np.where(undefined, 0.0, cov / np.where(undefined, 1.0, denom))
        yield start, np.arctanh(np.clip(r, -_R_CLIP, _R_CLIP))


@register
class CorrelationBreak(SavesArrays, Detector):
    """Departure of rolling pairwise correlations from their robust training values."""

    name = "correlation-break"
    description = "rolling pairwise correlations (Fisher z) vs their robust training structure"
    params = (
        Param("window", int, 30, "points per rolling correlation window", low=4),
        Param("reduce", str, "channel-max", "how pair departures combine into one score",
              choices=("channel-max", "pair-mean")),
        Param("min_spread", float, 0.05, "floor of the training spread of z per pair",
              low=1e-6),
        Param("base_weight", float, 0.05, "weight every pair gets on top of tanh(m)^2",
              low=0.0, high=10.0),
        Param("cap", float, 10.0, "largest departure one pair can contribute", low=1.0),
    )
    fitted_state = ("n_channels_", "first_", "second_", "centre_", "spread_", "weight_",
                    "incidence_")  # fmt: skip
    attributes = True

    def fit(self, train: np.ndarray) -> CorrelationBreak:
        train = check_series(train, "train")
        n, d = train.shape
        if n < self.window:
            raise ValueError(f"train: {n} steps is shorter than window={self.window}")
        self.n_channels_ = d
        self.first_, self.second_ = np.triu_indices(d, k=1)
        pairs = self.first_.size
        self.centre_ = np.zeros(pairs)
        self.spread_ = np.full(pairs, self.min_spread)
        for start, z in rolling_fisher_z(train, self.window, self.first_, self.second_):
            centre = np.median(z, axis=0)
            mad = np.median(np.abs(z - centre), axis=0)
            stop = start + z.shape[1]
            self.centre_[start:stop] = centre
            self.spread_[start:stop] = np.maximum(1.4826 * mad, self.min_spread)
        self.weight_ = np.tanh(self.centre_) ** 2 + self.base_weight
        # pair -> channel incidence, weighted: one matrix product sums a channel's pairs
        incidence = np.zeros((pairs, d))
        incidence[np.arange(pairs), self.first_] = self.weight_
        incidence[np.arange(pairs), self.second_] = self.weight_
        self.incidence_ = incidence
        return self

    def _channel_sums(self, series: np.ndarray) -> np.ndarray:
        """``(n - window + 1, d)``: each channel's w-weighted sum of departures over its pairs
        (row i: the window ending at step ``i + window - 1``; zeros with a single channel)."""
        m = series.shape[0] - self.window + 1
        per_channel = np.zeros((m, self.n_channels_))
        for start, z in rolling_fisher_z(series, self.window, self.first_, self.second_):
            stop = start + z.shape[1]
            dev = np.abs(z - self.centre_[start:stop]) / self.spread_[start:stop]
            per_channel += np.minimum(dev, self.cap) @ self.incidence_[start:stop]
        return per_channel

    def _channel_means(self, per_channel: np.ndarray) -> np.ndarray:
        totals = self.incidence_.sum(axis=0)
        return per_channel / np.where(totals > 0, totals, 1.0)

    def score(self, series: np.ndarray) -> np.ndarray:
        series = check_series(series, "series", self.n_channels_)
        n = series.shape[0]
        out = np.full(n, WARMUP_SCORE)
        if n < self.window:
            return out
        if self.first_.size == 0:  # a single channel has no pairs
            out[self.window - 1 :] = 0.0
            return out
        per_channel = self._channel_sums(series)
        if self.reduce == "channel-max":
            out[self.window - 1 :] = self._channel_means(per_channel).max(axis=1)
        else:
            # every pair is counted twice in the per-channel sums
            total = 2.0 * self.weight_.sum()
            out[self.window - 1 :] = per_channel.sum(axis=1) / (total if total > 0 else 1.0)
        return out

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Each channel's w-weighted mean departure over its pairs (what ``channel-max`` takes
        the largest of), for either ``reduce``."""
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape, WARMUP_SCORE)
        if series.shape[0] >= self.window:
            out[self.window - 1 :] = self._channel_means(self._channel_sums(series))
        return out
