"""``module:Class`` detector plug-ins for the runner tests (never registered as built-ins).

They are named in test specs as ``runner.plugins:<Class>``; the tests folder is on the path of
pytest and of every worker process it starts.
"""

from __future__ import annotations

import time

import numpy as np

from benchkit.detector import Detector, Param, check_series


class _Base(Detector):
    params = (Param("seed", int, 0, "seed", low=0),)

    def fit(self, train: np.ndarray) -> _Base:
        self.mean_ = check_series(train, "train").mean(axis=0)
        return self

    def _distance(self, series: np.ndarray) -> np.ndarray:
        return np.abs(check_series(series) - self.mean_).sum(axis=1)


class Raising(_Base):
    """Fails in ``score``, as a buggy plug-in would."""

    name = "test-raising"

    def score(self, series: np.ndarray) -> np.ndarray:
        raise RuntimeError("plug-in bug on purpose")


class NaNScores(_Base):
    """Returns NaN for one test step."""

    name = "test-nan"

    def score(self, series: np.ndarray) -> np.ndarray:
        out = self._distance(series)
        out[len(out) // 2] = np.nan
        return out


class WrongLength(_Base):
    """Returns one score too few."""

    name = "test-short"

    def score(self, series: np.ndarray) -> np.ndarray:
        return self._distance(series)[1:]


class Sleepy(_Base):
    """Sleeps ``pause`` seconds in fit (in small steps, as Python code does)."""

    name = "test-sleepy"
    params = (*_Base.params, Param("pause", float, 0.2, "seconds to sleep in fit", low=0.0))

    def fit(self, train: np.ndarray) -> Sleepy:
        end = time.monotonic() + self.pause
        while time.monotonic() < end:
            time.sleep(0.01)
        return super().fit(train)

    def score(self, series: np.ndarray) -> np.ndarray:
        rng = np.random.default_rng(self.seed)
        return self._distance(series) + rng.random(series.shape[0])


class Windowed(_Base):
    """A detector with a ``window`` hyperparameter (for spec validation messages)."""

    name = "test-windowed"
    params = (*_Base.params, Param("window", int, 8, "window length", low=2))

    def score(self, series: np.ndarray) -> np.ndarray:
        return self._distance(series)
