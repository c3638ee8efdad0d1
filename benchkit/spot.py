"""Streaming POT thresholds: SPOT and DSPOT (Siffer et al., "Anomaly Detection in Streams with
Extreme Value Theory", KDD 2017, Algorithms 1 and 2).

Initialisation is the batch POT of :func:`benchkit.thresholds.pot_threshold` on the calibration
scores ``X_1..X_n``: an initial threshold ``t`` (an empirical quantile), the excesses
``Y = {X_i - t : X_i > t}`` (``N_t`` of them), a GPD fitted to them, and

    z_q = t + (sigma / gamma) * ((q * k / N_t) ** (-gamma) - 1)

with ``k = n``. Then, for each new score ``X_i`` (Algorithm 1, SPOT):

* ``X_i >= z_q``: an alert; the model is left unchanged (the paper writes ``X_i > z_q``;
  benchkit predicts ``score >= threshold`` everywhere, which differs only on exact ties);
* ``t < X_i < z_q``: a new peak: ``X_i - t`` joins ``Y``, ``N_t`` and ``k`` grow by one, the GPD is
  refitted on all of ``Y`` and ``z_q`` recomputed;
* ``X_i <= t``: ``k`` grows by one and ``z_q`` is recomputed (it only depends on ``k`` then).

DSPOT (Algorithm 2, ``depth = d > 0``) runs the same on ``X'_i = X_i - M_i``, where ``M_i`` is the
mean of the last ``d`` raw scores that were not alerts; its calibration starts with
``W = X_1..X_d`` and uses ``X'_{d+1}..X'_n`` (so ``k = n - d``). The threshold on the raw score is
``M_i + z_q``.

While the tail holds fewer than :data:`~benchkit.thresholds.MIN_EXCESSES` distinct peaks, the
threshold is the empirical ``1 - q`` quantile of the calibration scores, as in batch POT, and it
is not updated until enough peaks have arrived.

The update is sequential by definition (each step's threshold depends on the alerts before it).
:meth:`StreamingPot.run` computes SPOT's stretches between peaks at once and the peaks one by
one, with the same arithmetic as :meth:`StreamingPot.update`, so a batch and a stream of the
same scores give the same thresholds bit for bit (tested).
"""

from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from benchkit.thresholds import MIN_EXCESSES, fit_gpd, spot_threshold


@dataclass(frozen=True)
class SpotStep:
    """The outcome of one streamed score: the raw-score threshold it was compared with, whether
    it is an alert, and whether it became a peak (refitting the tail)."""

    threshold: float
    alert: bool
    peak: bool


class StreamingPot:
    """SPOT (``depth=0``) or DSPOT (``depth > 0``) threshold state.

    Parameters
    ----------
    calibration : finite calibration scores (train scores after the warm-up).
    risk : q, the probability that a normal score exceeds the threshold.
    initial_quantile : level of the empirical quantile used as initial threshold t.
    depth : DSPOT's moving-average depth d (0 = SPOT).
    """

    def __init__(
        self,
        calibration: np.ndarray,
        risk: float = 1e-3,
        initial_quantile: float = 0.98,
        depth: int = 0,
    ) -> None:
        x = np.asarray(calibration, dtype=np.float64)
        if x.ndim != 1 or x.size == 0 or not np.isfinite(x).all():
            raise ValueError("calibration scores must be a non-empty 1-D array of finite values")
        if not 0.0 < risk < 1.0 - initial_quantile:
            raise ValueError(
                f"risk {risk} must be in (0, 1 - initial quantile = {1 - initial_quantile})"
            )
        if depth < 0 or depth >= x.size:
            raise ValueError(f"depth {depth} must be in [0, {x.size}) (calibration length)")
        self.risk, self.depth = float(risk), int(depth)
        self.window: deque[float] = deque(maxlen=depth) if depth else deque()
        if depth:
            x = self._detrend_calibration(x, depth)
        self.t = float(np.quantile(x, initial_quantile))
        self.excesses: list[float] = [float(v) for v in x[x > self.t] - self.t]
        self.k = int(x.size)
        self.fallback = float(np.quantile(x, 1.0 - risk))
        self.gamma = self.sigma = math.nan
        self._refit()

    def _detrend_calibration(self, x: np.ndarray, depth: int) -> np.ndarray:
        """``X'_{d+1..n}`` of Algorithm 2's initialisation; leaves ``W`` = the last d scores."""
        out = np.empty(x.size - depth)
        self.window.extend(float(v) for v in x[:depth])
        for i in range(depth, x.size):  # the calibration prefix only, once
            out[i - depth] = x[i] - self.drift
            self.window.append(float(x[i]))
        return out

    @property
    def drift(self) -> float:
        """``M_i``: mean of the last ``depth`` non-alert raw scores (0 for SPOT)."""
        if not self.depth:
            return 0.0
        return float(np.mean(np.fromiter(self.window, dtype=np.float64, count=self.depth)))

    @property
    def n_excesses(self) -> int:
        """``N_t``, the number of peaks in the tail model."""
        return len(self.excesses)

    @property
    def method(self) -> str:
        """``"gpd"`` while the tail model is fitted, else ``"empirical"``."""
        return "gpd" if math.isfinite(self.gamma) else "empirical"

    def _refit(self) -> None:
        y = np.asarray(self.excesses)
        if y.size >= MIN_EXCESSES and np.ptp(y) > 0:
            self.gamma, self.sigma = fit_gpd(y)
        self._set_z()

    def _set_z(self) -> None:
        """z_q after a refit (eq. 1, scalar: the same arithmetic as batch POT)."""
        z = math.nan
        if math.isfinite(self.gamma):
            z = spot_threshold(self.t, self.gamma, self.sigma, self.risk, self.k, self.n_excesses)
        self.z = z if math.isfinite(z) else self.fallback

    def _z_after_normal_steps(self, ks: np.ndarray) -> np.ndarray:
        """z_q for each count ``k`` in ``ks`` with the tail unchanged (eq. 1, elementwise).

        Both :meth:`update` (one k) and :meth:`run` (a stretch of k) use this function, so a
        batch and a stream give the same bits.
        """
        if not math.isfinite(self.gamma):
            return np.full(ks.shape, self.fallback)
        r = self.risk * ks.astype(np.float64) / self.n_excesses
        if abs(self.gamma) < 1e-12:
            z = self.t - self.sigma * np.log(r)
        else:
            z = self.t + (self.sigma / self.gamma) * (np.power(r, -self.gamma) - 1.0)
        return np.where(np.isfinite(z), z, self.fallback)

    @property
    def threshold(self) -> float:
        """The threshold the next raw score is compared with (``M_i + z_q``)."""
        return self.drift + self.z if self.depth else self.z

    def update(self, score: float) -> SpotStep:
        """Process one raw score (Algorithm 1 or 2, one iteration); see the module docstring."""
        x = float(score)
        if not math.isfinite(x):
            raise ValueError(f"streamed score {x} is not finite")
        drift = self.drift
        value = x - drift if self.depth else x
        threshold = drift + self.z if self.depth else self.z
        if value >= self.z:
            return SpotStep(threshold, True, False)
        peak = value > self.t
        self.k += 1
        if peak:
            self.excesses.append(value - self.t)
            self._refit()
        elif math.isfinite(self.gamma):
            self.z = float(self._z_after_normal_steps(np.array([self.k]))[0])
        if self.depth:
            self.window.append(x)
        return SpotStep(threshold, False, peak)

    def run(self, scores: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Stream a batch of raw scores; return the thresholds used and the alerts, per step.

        SPOT: the stretches between scores above ``t`` only raise ``k``, so their thresholds are
        computed at once; only peaks and alerts are processed one by one. DSPOT's moving average
        changes at every step, so it is processed one step at a time.
        """
        s = np.asarray(scores, dtype=np.float64)
        if s.size and not np.isfinite(s).all():
            raise ValueError(f"streamed score {s[~np.isfinite(s)][0]} is not finite")
        thresholds = np.empty(s.size)
        alerts = np.zeros(s.size, dtype=bool)
        if self.depth:
            for i, x in enumerate(s.tolist()):  # sequential by definition (module docstring)
                step = self.update(x)
                thresholds[i], alerts[i] = step.threshold, step.alert
            return thresholds, alerts
        above = np.flatnonzero(s > self.t).tolist() + [s.size]  # t is fixed in SPOT
        i = 0
        for stop in above:  # one iteration per score above t, not per step
            while i < stop:
                m = stop - i
                ks = self.k + np.arange(m)
                zs = self._z_after_normal_steps(ks)
                zs[0] = self.z
                hits = np.flatnonzero(s[i:stop] >= zs)  # alerts below t: only when z_q < t
                done = int(hits[0]) if hits.size else m
                thresholds[i : i + done] = zs[:done]
                if done:
                    self.k += done
                    self.z = float(self._z_after_normal_steps(np.array([self.k]))[0]) \
                        if math.isfinite(self.gamma) else self.z
                i += done
                if i < stop:  # an alert inside the stretch
                    step = self.update(float(s[i]))
                    thresholds[i], alerts[i] = step.threshold, step.alert
                    i += 1
            if stop < s.size:
                step = self.update(float(s[stop]))
                thresholds[stop], alerts[stop] = step.threshold, step.alert
                i = stop + 1
        return thresholds, alerts
