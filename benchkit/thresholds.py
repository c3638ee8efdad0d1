"""Threshold strategies that need no test labels: POT (peaks over threshold), a train quantile and
an alert budget (false alerts per day on train).

The oracle strategy (best F1 on the test labels) lives in :mod:`benchkit.metrics`
(``oracle_metric_set``); this module only calibrates on train scores.

POT follows the initialisation step of SPOT (Siffer et al., "Anomaly Detection in Streams with
Extreme Value Theory", KDD 2017): take an initial threshold ``t`` (a high empirical quantile of the
calibration scores), fit a generalized Pareto distribution (GPD) to the excesses ``x - t`` of the
``N_t`` scores above it by maximum likelihood, and set

    z_q = t + (sigma / gamma) * ((q * n / N_t) ** (-gamma) - 1)        (gamma != 0)
    z_q = t - sigma * log(q * n / N_t)                                  (gamma == 0)

so that a calibration score exceeds ``z_q`` with probability ``q`` (the risk). The GPD is fitted
with our own profile-likelihood search (Grimshaw's reduction to one parameter), so the tests can
compare it with ``scipy.stats.genpareto`` independently.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from benchkit.metrics import alerts

MIN_EXCESSES = 10
"""Fewer excesses make a GPD fit meaningless; POT then falls back (see :func:`pot_threshold`)."""


@dataclass(frozen=True)
class PotResult:
    """A POT threshold and how it was obtained.

    ``method`` is ``"gpd"`` (the SPOT formula) or ``"empirical"`` (too few excesses or a degenerate
    tail: the empirical ``1 - q`` quantile of the calibration scores is used instead).
    """

    threshold: float
    initial_threshold: float
    gamma: float
    sigma: float
    n_excesses: int
    n_scores: int
    method: str


def calibration_scores(train_scores: np.ndarray, warmup: int) -> np.ndarray:
    """The train scores used for calibration: warm-up steps dropped, finite values only."""
    s = np.asarray(train_scores, dtype=np.float64)[max(int(warmup), 0) :]
    return s[np.isfinite(s)]


def quantile_threshold(scores: np.ndarray, level: float) -> float:
    """The empirical ``level`` quantile of ``scores`` (numpy's default linear interpolation)."""
    s = np.asarray(scores, dtype=np.float64)
    if s.size == 0:
        raise ValueError("no finite calibration scores to take a quantile of")
    return float(np.quantile(s, level))


def _gpd_profile_loglik(theta: np.ndarray, excesses: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Profile log-likelihood of the GPD at ``theta = gamma / sigma`` (Grimshaw 1993).

    For fixed theta the MLE of gamma is ``mean(log1p(theta * y))`` and ``sigma = gamma / theta``,
    which gives ``l(theta) = -N * (log(gamma / theta) + gamma + 1)``.
    """
    theta = np.atleast_1d(np.asarray(theta, dtype=np.float64))
    gamma = np.log1p(theta[:, None] * excesses[None, :]).mean(axis=1)
    n = excesses.size
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = gamma / theta
        ll = -n * (np.log(ratio) + gamma + 1.0)
    ll = np.where(np.isfinite(ll) & (ratio > 0), ll, -np.inf)
    return ll, gamma


def fit_gpd(excesses: np.ndarray) -> tuple[float, float]:
    """Maximum-likelihood ``(gamma, sigma)`` of a GPD with location 0 for positive ``excesses``.

    The one-parameter profile likelihood over ``theta = gamma / sigma`` is scanned on a grid on
    both sides of 0 (``theta > -1 / max(y)`` keeps every ``1 + theta * y`` positive), refined with a
    bounded Brent search, and compared with the exponential case (gamma = 0, sigma = mean).
    """
    y = np.asarray(excesses, dtype=np.float64)
    if y.size == 0 or not np.all(y > 0):
        raise ValueError("GPD excesses must be a non-empty array of positive values")
    n, mean, ymax = y.size, float(y.mean()), float(y.max())
    best_ll, best = -n * (np.log(mean) + 1.0), (0.0, mean)  # exponential limit
    lower = -1.0 / ymax * (1.0 - 1e-9)
    scale = 1.0 / mean
    toward_bound = 1.0 - np.geomspace(0.5, 1e-9, 100)
    grid = np.sort(
        np.concatenate(
            [
                lower
                * np.concatenate([np.geomspace(1e-6, 0.5, 100, endpoint=False), toward_bound]),
                scale * np.geomspace(1e-6, 1e4, 200),
            ]
        )
    )
    ll, _ = _gpd_profile_loglik(grid, y)
    i = int(np.argmax(ll))
    lo = grid[i - 1] if i > 0 else grid[i]
    hi = grid[i + 1] if i + 1 < grid.size else grid[i]
    if lo > hi:
        lo, hi = hi, lo
    candidates = [grid[i]]
    if hi > lo:
        res = minimize_scalar(
            lambda t: -_gpd_profile_loglik(np.array([t]), y)[0][0],
            bounds=(lo, hi),
            method="bounded",
            options={"xatol": 1e-12 * max(1.0, abs(hi))},
        )
        candidates.append(float(res.x))
    ll_c, gamma_c = _gpd_profile_loglik(np.asarray(candidates), y)
    j = int(np.argmax(ll_c))
    if ll_c[j] > best_ll and abs(candidates[j]) > 1e-12:
        best = (float(gamma_c[j]), float(gamma_c[j] / candidates[j]))
    return best


def spot_threshold(
    initial_threshold: float,
    gamma: float,
    sigma: float,
    risk: float,
    n_scores: int,
    n_excesses: int,
) -> float:
    """The SPOT threshold z_q of Siffer et al. (2017), eq. (1) of the module docstring."""
    r = risk * n_scores / n_excesses
    if abs(gamma) < 1e-12:
        return float(initial_threshold - sigma * np.log(r))
    return float(initial_threshold + (sigma / gamma) * (r ** (-gamma) - 1.0))


def pot_threshold(
    scores: np.ndarray, risk: float = 1e-3, initial_quantile: float = 0.98
) -> PotResult:
    """POT threshold of calibration ``scores`` at risk ``q`` (Siffer et al. 2017).

    Parameters
    ----------
    scores : finite calibration scores (see :func:`calibration_scores`).
    risk : q, the probability that a normal score exceeds the threshold; must be below
        ``1 - initial_quantile`` (the GPD only describes the tail above the initial threshold).
    initial_quantile : level of the empirical quantile used as initial threshold t.

    Returns
    -------
    PotResult; with fewer than :data:`MIN_EXCESSES` scores strictly above t (heavily tied or
    very short score series) the empirical ``1 - risk`` quantile is returned, with
    ``method="empirical"``.
    """
    s = np.asarray(scores, dtype=np.float64)
    if s.size == 0:
        raise ValueError("no finite calibration scores for POT")
    if not 0.0 < risk < 1.0 - initial_quantile:
        raise ValueError(
            f"POT risk {risk} must be in (0, 1 - initial quantile = {1 - initial_quantile})"
        )
    t = float(np.quantile(s, initial_quantile))
    excesses = s[s > t] - t
    n_exc = int(excesses.size)
    if n_exc >= MIN_EXCESSES and np.ptp(excesses) > 0:
        gamma, sigma = fit_gpd(excesses)
        z = spot_threshold(t, gamma, sigma, risk, s.size, n_exc)
        if np.isfinite(z):
            return PotResult(z, t, gamma, sigma, n_exc, int(s.size), "gpd")
    z = float(np.quantile(s, 1.0 - risk))
    return PotResult(z, t, float("nan"), float("nan"), n_exc, int(s.size), "empirical")


@dataclass(frozen=True)
class AlertBudgetResult:
    """An alert-budget threshold and what it gives on the calibration scores."""

    threshold: float
    train_false_alerts: int
    train_duration: float


def alert_budget_threshold(
    scores: np.ndarray,
    budget: float,
    merge_gap: int = 0,
    step_seconds: float | None = None,
    per: str = "day",
) -> AlertBudgetResult:
    """The lowest threshold whose false alerts on the calibration ``scores`` stay within budget.

    The calibration scores (train, after warm-up) count as normal operation, so every alert on
    them is false. Walking down from the highest score, the threshold is the last one before the
    false alerts first exceed ``budget`` per day (``per="day"``, needs ``step_seconds``) or per
    1,000 steps (``per="1000-steps"``): lowering a threshold can merge alerts, so the count is
    not monotone and the walk stops at the first excess. When even the highest score exceeds
    the budget, the threshold lies just above it (nothing predicted on train).

    Common practice, no source: an operator sizes alerting by the pages per day they can take.
    """
    s = np.asarray(scores, dtype=np.float64)
    if s.size == 0:
        raise ValueError("no finite calibration scores for the alert budget")
    length = alerts.duration(len(s), step_seconds, per)
    if not np.isfinite(length):
        raise ValueError("an alert budget per day needs the step length of the data")
    curve = alerts.alert_curve(s, np.zeros(len(s), dtype=np.int8), merge_gap)
    at = alerts.highest_within(curve.false_alerts, budget * length)
    if at < 0:
        return AlertBudgetResult(float(np.nextafter(curve.thresholds[0], np.inf)), 0, length)
    return AlertBudgetResult(
        float(curve.thresholds[at]), int(curve.false_alerts[at]), length
    )
