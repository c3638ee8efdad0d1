"""Trivial reference detectors that every scorecard shows beside real methods.

Trivial methods often rival complex ones on popular benchmarks (Wu & Keogh, 2021); putting
them in every table makes that visible.
"""

from __future__ import annotations

import numpy as np

from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series
from benchkit.persist import SavesArrays
from benchkit.registry import register


@register
class RandomScores(SavesArrays, Detector):
    """Uniform random scores in [0, 1) from the seed; they ignore the data entirely."""

    name = "random"
    description = "uniform random scores from the seed (a floor every method must beat)"
    params = (Param("seed", int, 0, "seed of the score stream", low=0),)
    fitted_state = ("n_channels_",)
    attributes = True

    def fit(self, train: np.ndarray) -> RandomScores:
        self.n_channels_ = check_series(train, "train").shape[1]
        return self

    def score(self, series: np.ndarray) -> np.ndarray:
        series = check_series(series, "series", self.n_channels_)
        # a fresh generator per call: step t always gets the t-th draw of the seed's stream
        return np.random.default_rng(self.seed).random(series.shape[0])

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Uniform random attributions from their own stream of the seed: the reference that
        every attribution must beat (row t is the t-th row of draws, so it is causal)."""
        series = check_series(series, "series", self.n_channels_)
        return np.random.default_rng([self.seed, 1]).random(series.shape)


_NORMS = {
    "l2": lambda diff: np.sqrt(np.einsum("ij,ij->i", diff, diff)),
    "l1": lambda diff: np.abs(diff).sum(axis=1),
    "max": lambda diff: np.abs(diff).max(axis=1),
}


@register
class StepChange(SavesArrays, Detector):
    """Magnitude of the one-step difference ``x_t - x_{t-1}`` across channels."""

    name = "step-change"
    description = "size of the one-step change of the KPI vector (a trivial reference)"
    params = (
        Param("norm", str, "l2", "how channel differences combine", choices=tuple(_NORMS)),
    )
    fitted_state = ("n_channels_",)
    attributes = True

    @property
    def warmup(self) -> int:
        """The first step has no predecessor."""
        return 1

    def fit(self, train: np.ndarray) -> StepChange:
        self.n_channels_ = check_series(train, "train").shape[1]
        return self

    def score(self, series: np.ndarray) -> np.ndarray:
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape[0], WARMUP_SCORE)
        out[1:] = _NORMS[self.norm](np.diff(series, axis=0))
        return out

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Each channel's absolute one-step change ``|x_t - x_{t-1}|`` (every norm ranks the
        channels alike)."""
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape, WARMUP_SCORE)
        out[1:] = np.abs(np.diff(series, axis=0))
        return out
