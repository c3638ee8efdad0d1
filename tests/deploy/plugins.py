"""A ``module:Class`` plug-in for the deploy tests (named ``deploy.plugins:<Class>``)."""

from __future__ import annotations

import numpy as np

from benchkit.detector import Detector, Param, check_series
from benchkit.persist import SavesArrays


class DistanceWithCulprits(SavesArrays, Detector):
    """Sum of absolute z-distances to the train mean; ``attribute`` gives each KPI's share."""

    name = "test-culprits"
    description = "absolute distance to the train mean, attributed per KPI"
    params = (Param("seed", int, 0, "unused", low=0),)
    fitted_state = ("mean_",)
    attributes = True

    def fit(self, train: np.ndarray) -> DistanceWithCulprits:
        self.mean_ = check_series(train, "train").mean(axis=0)
        return self

    def attribute(self, series: np.ndarray) -> np.ndarray:
        return np.abs(check_series(series, "series", self.mean_.size) - self.mean_)

    def score(self, series: np.ndarray) -> np.ndarray:
        return self.attribute(series).sum(axis=1)
