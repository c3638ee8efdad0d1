"""Causal window features, and a base class for detectors that score feature rows with a model.

The feature row of step t is built from the window of the last ``window`` points ending at t
(steps ``t - window + 1 .. t``), so a score computed from it is causal. Rows exist from step
``window - 1`` on; earlier steps are warm-up.
"""

from __future__ import annotations

from typing import Any, ClassVar

import numpy as np

from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series
from benchkit.persist import load_refit_state, save_refit_state
from benchkit.windows import sliding_windows

FEATURE_SETS: dict[str, tuple[str, ...]] = {
    "point": ("last",),
    "summary": ("last", "mean", "std"),
    "extended": ("last", "mean", "std", "min", "max"),
}


def window_features(series: np.ndarray, window: int, features: str = "summary") -> np.ndarray:
    """Feature rows from the causal window ending at each step.

    Parameters
    ----------
    series : (n, d) float64 array.
    window : number of points per window (>= 1).
    features : a key of :data:`FEATURE_SETS`: ``point`` (the last point), ``summary`` (last point,
        window mean, window standard deviation) or ``extended`` (summary plus window min and max).

    Returns
    -------
    (n - window + 1, k * d) float64 array; row i describes the window ending at step
    ``i + window - 1``, blocks of ``d`` columns in the order of the feature set.
    """
    kinds = FEATURE_SETS[features]
    views = sliding_windows(series, window)  # (m, window, d), no copy
    blocks = {
        "last": lambda: views[:, -1, :],
        "mean": lambda: views.mean(axis=1),
        "std": lambda: views.std(axis=1),
        "min": lambda: views.min(axis=1),
        "max": lambda: views.max(axis=1),
    }
    return np.concatenate([blocks[k]() for k in kinds], axis=1).astype(np.float64, copy=False)


def subsample_rows(n: int, limit: int, rng: np.random.Generator) -> np.ndarray:
    """Sorted indices of at most ``limit`` of ``n`` rows, drawn without replacement from ``rng``."""
    if n <= limit:
        return np.arange(n)
    return np.sort(rng.choice(n, size=limit, replace=False))


def derived_seed(rng: np.random.Generator) -> int:
    """An integer seed for a library that takes ``random_state``, drawn from ``rng``."""
    return int(rng.integers(0, 2**31 - 1))


def window_params(max_train: int = 20000) -> tuple[Param, ...]:
    """The hyperparameters every window-feature detector shares (``max_train`` default varies)."""
    return (
        Param("window", int, 10, "points per causal window the features summarise", low=1),
        Param("features", str, "summary", "feature set per step", choices=tuple(FEATURE_SETS)),
        Param("max_train", int, max_train, "at most this many training rows (random subsample)",
              low=10),
        Param("seed", int, 0, "seed of the subsample and of the model", low=0),
    )


WINDOW_PARAMS: tuple[Param, ...] = window_params()


class FeatureModelDetector(Detector):
    """Base: fit a model on training feature rows, score each step's row with it.

    Subclasses set ``params`` (usually ``WINDOW_PARAMS`` plus their own) and implement
    :meth:`_fit_model` and :meth:`_score_rows`. Every feature row is scored on its own, so the
    score of step t depends only on the window ending at t.
    """

    params: ClassVar[tuple[Param, ...]] = WINDOW_PARAMS

    def _fit_model(self, rows: np.ndarray, rng: np.random.Generator) -> Any:
        raise NotImplementedError

    def _score_rows(self, rows: np.ndarray) -> np.ndarray:
        raise NotImplementedError

    def fit(self, train: np.ndarray) -> FeatureModelDetector:
        train = check_series(train, "train")
        if train.shape[0] < self.window:
            raise ValueError(
                f"train: {train.shape[0]} steps is shorter than window={self.window}"
            )
        rng = np.random.default_rng(self.seed)
        rows = window_features(train, self.window, self.features)
        rows = rows[subsample_rows(rows.shape[0], self.max_train, rng)]
        self.n_channels_ = train.shape[1]
        self.model_ = self._fit_model(rows, rng)
        self.fit_train_ = train  # a reference (no copy): what save() records for a refit
        return self

    def save(self, path: Any) -> None:
        """Save the training series and digests; PyOD's fitted models are never pickled.

        :meth:`load` refits with the same hyperparameters and seed and refuses when the data or
        the refit's scores differ (see :mod:`benchkit.persist`).
        """
        if not hasattr(self, "fit_train_"):
            raise RuntimeError(f"{self.name}: call fit() before save()")
        save_refit_state(self, self.fit_train_, path)

    @classmethod
    def load(cls, path: Any) -> FeatureModelDetector:
        """A fitted detector refitted from a file written by :meth:`save`."""
        return load_refit_state(cls, path)

    def score(self, series: np.ndarray) -> np.ndarray:
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape[0], WARMUP_SCORE)
        if series.shape[0] >= self.window:
            rows = window_features(series, self.window, self.features)
            out[self.window - 1 :] = self._score_rows(rows)
        return out
