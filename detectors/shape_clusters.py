"""Shape-cluster detector: distance of the window ending at t to its nearest training centroid.

Training windows (a random subsample) are clustered with tslearn's ``TimeSeriesKMeans``
(Euclidean metric); a step's score is the Euclidean distance of its causal window to the
nearest centroid. DTW is not offered: tslearn compiles it on first use, which costs tens of
seconds per worker process, and its scoring is orders of magnitude slower.

Attribution: the squared distance to the nearest centroid is a sum over channels, so each
channel's share is its squared distance to that centroid over the window's steps.
"""

from __future__ import annotations

import warnings

import numpy as np

from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series
from benchkit.persist import SavesArrays
from benchkit.registry import register
from benchkit.windows import sliding_windows
from detectors._features import derived_seed, subsample_rows

with warnings.catch_warnings():  # tslearn warns about optional hdf5 support on import
    warnings.simplefilter("ignore", UserWarning)
    from tslearn.clustering import TimeSeriesKMeans


_SHARE_CHUNK = 2048  # windows per block of per-channel shares


def nearest_centroid_distance(windows: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """Euclidean distance of each window ``(m, w, d)`` to its nearest centroid ``(k, w, d)``."""
    flat = windows.reshape(windows.shape[0], -1)
    cent = centroids.reshape(centroids.shape[0], -1)
    sq = (
        np.einsum("ij,ij->i", flat, flat)[:, None]
        - 2.0 * flat @ cent.T
        + np.einsum("ij,ij->i", cent, cent)[None, :]
    )
    return np.sqrt(np.maximum(sq.min(axis=1), 0.0))


def nearest_centroid_shares(windows: np.ndarray, centroids: np.ndarray) -> np.ndarray:
    """Per channel, the squared distance of each window ``(m, w, d)`` to its nearest centroid
    (summed over the window's steps): ``(m, d)``, summing to the squared distance."""
    cent = centroids.reshape(centroids.shape[0], -1)
    cent_sq = np.einsum("ij,ij->i", cent, cent)
    out = np.empty((windows.shape[0], windows.shape[2]))
    for start in range(0, windows.shape[0], _SHARE_CHUNK):  # bounds the (m, w, d) copies
        part = windows[start : start + _SHARE_CHUNK]
        sq = cent_sq[None, :] - 2.0 * part.reshape(part.shape[0], -1) @ cent.T
        diff = part - centroids[np.argmin(sq, axis=1)]  # |x|² is the same for every centroid
        out[start : start + part.shape[0]] = np.einsum("mwd,mwd->md", diff, diff)
    return out


@register
class ShapeClusters(SavesArrays, Detector):
    """Nearest-centroid distance of the causal window, centroids from k-means on train windows."""

    name = "shape-clusters"
    description = "distance of the recent window to the nearest of k training shape centroids"
    params = (
        Param("window", int, 16, "points per window", low=2),
        Param("n_clusters", int, 8, "number of centroids", low=1, high=256),
        Param("max_train_windows", int, 400, "at most this many training windows clustered",
              low=2),
        Param("max_iter", int, 20, "k-means iterations", low=1),
        Param("seed", int, 0, "seed of the subsample and of the k-means initialisation", low=0),
    )
    fitted_state = ("n_channels_", "centroids_")
    attributes = True

    def fit(self, train: np.ndarray) -> ShapeClusters:
        train = check_series(train, "train")
        if train.shape[0] < self.window:
            raise ValueError(f"train: {train.shape[0]} steps is shorter than window={self.window}")
        rng = np.random.default_rng(self.seed)
        views = sliding_windows(train, self.window)
        windows = np.ascontiguousarray(
            views[subsample_rows(views.shape[0], self.max_train_windows, rng)]
        )
        distinct = np.unique(windows.reshape(windows.shape[0], -1), axis=0).shape[0]
        k = min(self.n_clusters, distinct)
        self.n_channels_ = train.shape[1]
        if k == 1:
            self.centroids_ = windows.mean(axis=0, keepdims=True)
            return self
        model = TimeSeriesKMeans(
            n_clusters=k,
            metric="euclidean",
            max_iter=self.max_iter,
            random_state=derived_seed(rng),
            n_init=1,
        )
        with warnings.catch_warnings():  # "empty cluster" restarts are expected on tiny data
            warnings.simplefilter("ignore")
            model.fit(windows)
        self.centroids_ = np.asarray(model.cluster_centers_, dtype=np.float64)
        return self

    def score(self, series: np.ndarray) -> np.ndarray:
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape[0], WARMUP_SCORE)
        if series.shape[0] >= self.window:
            windows = sliding_windows(series, self.window)
            out[self.window - 1 :] = nearest_centroid_distance(windows, self.centroids_)
        return out

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Each channel's squared distance to the nearest centroid (see the module docstring)."""
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape, WARMUP_SCORE)
        if series.shape[0] >= self.window:
            windows = sliding_windows(series, self.window)
            out[self.window - 1 :] = nearest_centroid_shares(windows, self.centroids_)
        return out
