"""Scoring raw KPI rows with a bundle: a whole table at once, or one row at a time.

Both paths scale raw rows with the bundle's scaler and put the bundle's context (the last
``warmup`` train rows, scaled the same way) in front, exactly as the protocol scores a cell's
test part, so applying a bundle to the test part of its entity gives the cached scores.

The streaming path keeps only the last ``warmup + 1`` scaled rows and scores the window they
form. That gives the batch scores for detectors whose score at t depends on the window ending at
t and nothing else; :func:`stream_agreement` measures how far the two paths differ on real data
(export records it in the manifest; ``apply --follow`` refuses a bundle whose detector's scores
depend on more than its window).
"""

from __future__ import annotations

import os
from collections import deque
from typing import Any

import numpy as np

from benchkit.deploy.bundle import Bundle
from benchkit.errors import BenchkitInputError
from benchkit.spot import StreamingPot

UPDATES = ("fixed", "spot", "dspot")


class NonFiniteScore(BenchkitInputError):
    """The detector scored a row NaN or infinite; such a score is never written."""

STREAM_PROBES = 16  # steps compared between the batch and the streaming path at export
STREAM_TOLERANCE = 1e-5  # float32 rounding (torch); position-dependent scores differ by far more


def pin_numerics() -> None:
    """One BLAS/OpenMP thread and one torch thread, as in the runner's workers (the same
    variables and limits: :data:`benchkit.numerics.THREAD_ENVIRON`, :func:`limit_threads`)."""
    from benchkit.numerics import THREAD_ENVIRON
    from benchkit.worker import limit_threads

    os.environ.update(THREAD_ENVIRON)
    limit_threads()


def batch_scores(detector: Any, scaled_context: np.ndarray, scaled: np.ndarray) -> np.ndarray:
    """Scores of ``scaled`` rows after ``scaled_context`` (the context's own scores dropped)."""
    warmup = scaled_context.shape[0]
    # C order, as the protocol's arrays: BLAS rounds a Fortran-ordered product differently
    series = np.vstack([scaled_context, scaled]) if warmup else np.ascontiguousarray(scaled)
    scores = np.asarray(detector.score(series), dtype=np.float64)[warmup:]
    bad = np.flatnonzero(~np.isfinite(scores))
    if bad.size:
        raise NonFiniteScore(f"the detector gave a non-finite score at step {bad[0]}")
    return scores


def window_score(detector: Any, window: np.ndarray) -> float:
    """The score of the last row of ``window`` (``warmup + 1`` scaled rows)."""
    return float(detector.score(window)[-1])


def stream_agreement(detector: Any, series: np.ndarray, scores: np.ndarray, warmup: int) -> float:
    """Largest relative difference between batch ``scores`` of ``series`` and the scores of
    the ``warmup + 1``-row windows ending at :data:`STREAM_PROBES` evenly spaced steps."""
    n = series.shape[0]
    steps = np.unique(np.linspace(warmup, n - 1, min(STREAM_PROBES, n - warmup)).astype(int))
    worst = 0.0
    for t in steps:  # a handful of probe steps, not the series
        alone = window_score(detector, series[t - warmup : t + 1])
        worst = max(worst, abs(alone - scores[t]) / max(1.0, abs(scores[t])))
    return worst


def thresholder(bundle: Bundle, update: str, depth: int = 0) -> StreamingPot | None:
    """``None`` for the fixed threshold, else a SPOT (``depth=0``) or DSPOT state."""
    if update == "fixed":
        return None
    cal = bundle.threshold["calibration"]
    return StreamingPot(
        bundle.calibration,
        risk=cal["pot_risk"],
        initial_quantile=cal["pot_initial_quantile"],
        depth=depth if update == "dspot" else 0,
    )


def top_culprits(attribution: np.ndarray, channels: tuple[str, ...], k: int) -> list[str]:
    """Names of the ``k`` channels with the largest attribution (ties: the first listed)."""
    order = np.argsort(-np.asarray(attribution, dtype=np.float64), kind="stable")[:k]
    return [channels[i] for i in order]


class BatchScorer:
    """Scores, thresholds and alerts of a whole table of raw rows."""

    def __init__(self, bundle: Bundle) -> None:
        self.bundle = bundle
        self.context = bundle.prepare(bundle.context, context=True)

    def run(
        self, raw: np.ndarray, update: str = "fixed", depth: int = 0
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """``(scores, thresholds, alerts)`` of ``raw`` ``(n, d)`` rows."""
        scores = batch_scores(self.bundle.detector, self.context, self.bundle.prepare(raw))
        state = thresholder(self.bundle, update, depth)
        if state is None:
            theta = np.full(scores.size, float(self.bundle.threshold["value"]))
            return scores, theta, scores >= theta
        theta, alerts = state.run(scores)
        return scores, theta, alerts

    def attributions(self, raw: np.ndarray) -> np.ndarray | None:
        """Per-step channel attributions, where the detector declares ``attributes``."""
        if not getattr(self.bundle.detector, "attributes", False):
            return None
        attribute = self.bundle.detector.attribute
        series = np.vstack([self.context, self.bundle.prepare(raw)])
        return np.asarray(attribute(series))[self.context.shape[0] :]


class StreamScorer:
    """One raw row at a time; memory: the last ``warmup + 1`` scaled rows and the threshold."""

    def __init__(self, bundle: Bundle, update: str = "fixed", depth: int = 0) -> None:
        self.bundle = bundle
        self.rows: deque[np.ndarray] = deque(maxlen=bundle.warmup + 1)
        self.rows.extend(bundle.prepare(bundle.context, context=True))
        self.state = thresholder(bundle, update, depth)
        self.fixed = float(bundle.threshold["value"])
        self.step = 0

    def push(self, raw_row: np.ndarray) -> tuple[int, float, float, bool]:
        """Score one raw row: ``(step, score, threshold, alert)``."""
        self.rows.append(self.bundle.prepare(raw_row[None, :])[0])
        score = window_score(self.bundle.detector, np.asarray(self.rows))
        if not np.isfinite(score):
            raise NonFiniteScore(f"the detector gave a non-finite score at step {self.step}")
        if self.state is None:
            theta, alert = self.fixed, score >= self.fixed
        else:
            outcome = self.state.update(score)
            theta, alert = outcome.threshold, outcome.alert
        step, self.step = self.step, self.step + 1
        return step, score, theta, bool(alert)

    def attribution(self) -> np.ndarray | None:
        """Channel attribution of the latest row, where the detector declares ``attributes``."""
        if not getattr(self.bundle.detector, "attributes", False):
            return None
        attribute = self.bundle.detector.attribute
        return np.asarray(attribute(np.asarray(self.rows)))[-1]
