"""Isolation forest (Liu, Ting & Zhou, 2008) on causal window features, via PyOD's ``IForest``."""

from __future__ import annotations

import numpy as np
from pyod.models.iforest import IForest

from benchkit.detector import Param
from benchkit.registry import register
from detectors._features import WINDOW_PARAMS, FeatureModelDetector, derived_seed


@register
class IsolationForest(FeatureModelDetector):
    """Mean isolation depth of each step's window-feature row, inverted (shallow = anomalous)."""

    name = "isolation-forest"
    description = "isolation forest (PyOD IForest) on last point + window mean/std per KPI"
    params = WINDOW_PARAMS + (
        Param("n_estimators", int, 100, "number of trees", low=1, high=5000),
        Param("max_samples", int, 256, "rows drawn to grow each tree", low=2),
        Param("max_features", float, 1.0, "fraction of features drawn per tree",
              low=0.01, high=1.0),
    )

    def _fit_model(self, rows: np.ndarray, rng: np.random.Generator) -> IForest:
        model = IForest(
            n_estimators=self.n_estimators,
            max_samples=min(self.max_samples, rows.shape[0]),
            max_features=self.max_features,
            n_jobs=1,
            random_state=derived_seed(rng),
        )
        return model.fit(rows)

    def _score_rows(self, rows: np.ndarray) -> np.ndarray:
        return np.asarray(self.model_.decision_function(rows), dtype=np.float64)
