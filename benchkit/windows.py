"""Strided sliding windows (views, never copies) and scalers fitted on train only."""

from __future__ import annotations

import numpy as np
from numpy.lib.stride_tricks import as_strided


def sliding_windows(series: np.ndarray, window: int, stride: int = 1) -> np.ndarray:
    """Read-only view of all windows of ``window`` steps.

    Parameters
    ----------
    series : (n, d) array.
    window : window length (>= 1, <= n).
    stride : step between window starts.

    Returns
    -------
    (n_windows, window, d) view sharing memory with ``series``; window i covers steps
    ``i*stride .. i*stride + window - 1``.
    """
    a = np.asarray(series)
    if a.ndim != 2:
        raise ValueError(f"expected a 2-D series, got shape {a.shape}")
    n, d = a.shape
    if window < 1 or stride < 1:
        raise ValueError("window and stride must be >= 1")
    if window > n:
        return np.empty((0, window, d), dtype=a.dtype)
    count = (n - window) // stride + 1
    s0, s1 = a.strides
    return as_strided(a, shape=(count, window, d), strides=(s0 * stride, s0, s1), writeable=False)


class Scaler:
    """Per-channel affine scaler fitted on train only; constant channels are safe."""

    def __init__(self, method: str = "zscore") -> None:
        if method not in ("zscore", "minmax", "none"):
            raise ValueError(f"unknown scaling {method!r}; valid: zscore, minmax, none")
        self.method = method

    def fit(self, train: np.ndarray) -> Scaler:
        x = np.asarray(train, dtype=np.float64)
        d = x.shape[1]
        if self.method == "zscore":
            self.offset_ = x.mean(axis=0)
            spread = x.std(axis=0)
        elif self.method == "minmax":
            self.offset_ = x.min(axis=0)
            spread = x.max(axis=0) - self.offset_
        else:
            self.offset_, spread = np.zeros(d), np.ones(d)
        # a constant channel keeps its offset removed and is not divided by zero
        self.scale_ = np.where(spread > 1e-12 * np.maximum(1.0, np.abs(self.offset_)), spread, 1.0)
        self.constant_ = spread <= 1e-12 * np.maximum(1.0, np.abs(self.offset_))
        return self

    def transform(self, series: np.ndarray) -> np.ndarray:
        return (np.asarray(series, dtype=np.float64) - self.offset_) / self.scale_

    def fit_transform(self, train: np.ndarray) -> np.ndarray:
        return self.fit(train).transform(train)


CONSTANT_CHANNEL_MODES = ("keep", "drop", "clip")
"""What the protocol does with KPIs that are constant over train (spec key ``constant_channels``):

* ``keep``: nothing; they enter every detector as they are (constant in train, free in test);
* ``drop``: they are removed from train and test before any detector sees the series;
* ``clip``: every channel's scaled test values are clipped into the range the channel spanned
  in the scaled train series, so a KPI constant in train stays at its train value in test.
"""


def constant_in_train(train: np.ndarray) -> np.ndarray:
    """Boolean mask of the channels whose train values do not vary (range <= 1e-12 of scale)."""
    x = np.asarray(train, dtype=np.float64)
    low, high = x.min(axis=0), x.max(axis=0)
    return (high - low) <= 1e-12 * np.maximum(1.0, np.abs(low))


def handle_constant_channels(
    train: np.ndarray, test: np.ndarray, mode: str
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Apply a :data:`CONSTANT_CHANNEL_MODES` rule to a scaled train/test pair.

    Returns
    -------
    train, test : the series the detector sees.
    kept : indices of the original channels they hold (all of them unless ``mode == "drop"``).

    Raises ValueError for an unknown mode, or when ``drop`` would leave no channel.
    """
    if mode not in CONSTANT_CHANNEL_MODES:
        raise ValueError(
            f"unknown constant_channels {mode!r}; valid: {', '.join(CONSTANT_CHANNEL_MODES)}"
        )
    d = train.shape[1]
    if mode == "keep":
        return train, test, np.arange(d)
    if mode == "clip":
        return train, np.clip(test, train.min(axis=0), train.max(axis=0)), np.arange(d)
    kept = np.flatnonzero(~constant_in_train(train))
    if kept.size == 0:
        raise ValueError(
            f"all {d} channels are constant over train: constant_channels = \"drop\" leaves "
            "no input"
        )
    if kept.size == d:
        return train, test, kept
    return train[:, kept], test[:, kept], kept
