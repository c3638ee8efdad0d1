"""``module:Class`` detector plug-ins for the runner tests (never registered as built-ins).

They are named in test specs as ``runner.plugins:<Class>``; the tests folder is on the path of
pytest and of every worker process it starts.
"""

from __future__ import annotations

import os
import time

import numpy as np

from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series


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


class Echo(_Base):
    """Scores each step with its (scaled) first channel; the first ``window - 1`` are warm-up."""

    name = "test-echo"
    params = (*_Base.params, Param("window", int, 5, "warm-up length + 1", low=1))

    def score(self, series: np.ndarray) -> np.ndarray:
        out = check_series(series)[:, 0].copy()
        out[: self.window - 1] = WARMUP_SCORE
        return out


class Crashing(_Base):
    """Ends its process abruptly in fit, as a crash in native code would."""

    name = "test-crashing"

    def fit(self, train: np.ndarray) -> Crashing:
        os._exit(9)

    def score(self, series: np.ndarray) -> np.ndarray:  # pragma: no cover - never reached
        return self._distance(series)


class Stuck(_Base):
    """Blocks in one long C call (``time.sleep``), which no in-thread timer can interrupt."""

    name = "test-stuck"

    def fit(self, train: np.ndarray) -> Stuck:
        time.sleep(60)
        return self

    def score(self, series: np.ndarray) -> np.ndarray:  # pragma: no cover - never reached
        return self._distance(series)


class PathRecorder(_Base):
    """Writes the numeric path its worker process is on (``benchkit.numerics.observe``) as JSON
    to the file named by ``record``, then scores like the others."""

    name = "test-path-recorder"
    params = (*_Base.params, Param("record", str, "", "file to write the observed path to"))

    def fit(self, train: np.ndarray) -> PathRecorder:
        import json

        from benchkit import numerics

        with open(self.record, "w", encoding="utf-8") as fh:
            json.dump(numerics.observe(), fh)
        return super().fit(train)

    def score(self, series: np.ndarray) -> np.ndarray:
        return self._distance(series)
