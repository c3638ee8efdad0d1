"""SPOT and DSPOT (Siffer et al., "Anomaly Detection in Streams with Extreme Value Theory",
KDD 2017, Algorithms 1 and 2) checked against the paper's definitions and our batch POT.

References used below: the paper's update rules (quoted in ``benchkit/spot.py``), its threshold
formula (eq. 1, already checked by hand in tests/runner/test_thresholds.py), benchkit's batch
``pot_threshold`` (the paper's initialisation step), and scipy's GPD fit for the refitted tail.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from benchkit.spot import StreamingPot
from benchkit.thresholds import fit_gpd, pot_threshold, spot_threshold

RISK, LEVEL = 1e-3, 0.98


@pytest.fixture
def calibration():
    # invented normal scores with an exponential-like right tail
    return np.random.default_rng(3).gamma(2.0, 1.0, size=2000)


def test_initial_threshold_is_the_batch_pot(calibration):
    spot = StreamingPot(calibration, RISK, LEVEL)
    pot = pot_threshold(calibration, RISK, LEVEL)
    assert spot.threshold == pot.threshold and spot.method == pot.method == "gpd"
    assert (spot.t, spot.n_excesses, spot.k) == (pot.initial_threshold, pot.n_excesses, 2000)
    assert (spot.gamma, spot.sigma) == (pot.gamma, pot.sigma)


def test_scores_below_t_only_raise_k(calibration):
    # Algorithm 1, "else" branch: k <- k + 1 and z_q is recomputed from eq. (1) with the new k
    spot = StreamingPot(calibration, RISK, LEVEL)
    t, gamma, sigma, n_t = spot.t, spot.gamma, spot.sigma, spot.n_excesses
    for _ in range(500):
        step = spot.update(t * 0.5)
        assert not step.alert and not step.peak
    assert spot.k == 2500
    assert spot.threshold == spot_threshold(t, gamma, sigma, RISK, 2500, n_t)
    # more observations without peaks: the tail is rarer, so the threshold moves down
    assert spot.threshold < StreamingPot(calibration, RISK, LEVEL).threshold


def test_a_peak_refits_the_gpd_on_all_excesses(calibration):
    # Algorithm 1, "X_i > t" branch: Y_t <- Y_t u {X_i - t}, N_t + 1, k + 1, GPD refit, z_q
    spot = StreamingPot(calibration, RISK, LEVEL)
    x = (spot.t + spot.threshold) / 2.0
    before = calibration[calibration > spot.t] - spot.t
    step = spot.update(x)
    assert step.peak and not step.alert
    excesses = np.append(before, x - spot.t)
    gamma, sigma = fit_gpd(excesses)
    assert (spot.gamma, spot.sigma) == (gamma, sigma)
    assert spot.threshold == spot_threshold(spot.t, gamma, sigma, RISK, 2001, excesses.size)
    # the refitted tail against an independent maximum-likelihood fit (scipy, location 0)
    ref_c, _, ref_scale = stats.genpareto.fit(excesses, floc=0)
    assert gamma == pytest.approx(ref_c, abs=5e-3) and sigma == pytest.approx(ref_scale, rel=5e-3)


def test_an_alert_leaves_the_model_unchanged(calibration):
    # Algorithm 1, "X_i > z_q" branch: the point is flagged and not added to the model
    spot = StreamingPot(calibration, RISK, LEVEL)
    state = (spot.threshold, spot.k, spot.n_excesses, spot.gamma, spot.sigma)
    step = spot.update(spot.threshold * 3.0)
    assert step.alert and not step.peak and step.threshold == state[0]
    assert (spot.threshold, spot.k, spot.n_excesses, spot.gamma, spot.sigma) == state


def test_false_alarm_rate_on_fresh_normal_data_is_near_the_risk():
    # the paper's guarantee: on data from the calibration distribution, P(X > z_q) ~= q
    rng = np.random.default_rng(11)
    spot = StreamingPot(rng.exponential(size=5_000), 5e-3, LEVEL)
    _, alerts = spot.run(rng.exponential(size=10_000))
    assert 1.25e-3 < alerts.mean() < 15e-3  # 50 expected; a generous band (sampling noise)


def test_run_equals_update_step_by_step(calibration):
    stream = np.random.default_rng(4).gamma(2.0, 1.2, size=3000)
    thresholds, alerts = StreamingPot(calibration, RISK, LEVEL).run(stream)
    one = StreamingPot(calibration, RISK, LEVEL)
    steps = [one.update(x) for x in stream]
    assert thresholds.tolist() == [s.threshold for s in steps]
    assert alerts.tolist() == [s.alert for s in steps]


def test_dspot_initialisation_and_drift_follow_algorithm_2():
    rng = np.random.default_rng(5)
    n, d = 1500, 20
    calib = rng.normal(size=n) + np.linspace(0.0, 30.0, n)  # a drifting level
    dspot = StreamingPot(calib, RISK, LEVEL, depth=d)
    # X'_i = X_i - mean(X_{i-d}..X_{i-1}) for i = d+1..n, then batch POT on them (k = n - d)
    detrended = np.array([calib[i] - calib[i - d : i].mean() for i in range(d, n)])
    pot = pot_threshold(detrended, RISK, LEVEL)
    assert dspot.k == n - d
    assert dspot.z == pytest.approx(pot.threshold, rel=1e-12)
    # the raw-score threshold is M_i + z_q with M_i the mean of the last d normal raw scores
    assert dspot.threshold == pytest.approx(calib[-d:].mean() + dspot.z, rel=1e-12)
    # an alert does not enter the window W; a normal score does
    window = list(dspot.window)
    step = dspot.update(dspot.threshold + 100.0)
    assert step.alert and list(dspot.window) == window
    dspot.update(calib[-1])
    assert list(dspot.window) == window[1:] + [calib[-1]]


def test_dspot_follows_a_drift_that_spot_mistakes_for_anomalies():
    # the paper's motivation for DSPOT (section 4.3): a drifting level fools SPOT, not DSPOT
    rng = np.random.default_rng(6)
    calib = rng.normal(size=2000)
    stream = rng.normal(size=3000) + np.linspace(0.0, 20.0, 3000)
    _, spot_alerts = StreamingPot(calib, RISK, LEVEL).run(stream)
    _, dspot_alerts = StreamingPot(calib, RISK, LEVEL, depth=20).run(stream)
    assert spot_alerts.sum() > 1000 and dspot_alerts.sum() < 30


def test_few_excesses_use_the_empirical_quantile_until_the_tail_fills():
    calib = np.concatenate([np.zeros(95), np.arange(1.0, 6.0)])  # 5 values above t: too few
    spot = StreamingPot(calib, 0.01, 0.95)
    pot = pot_threshold(calib, 0.01, 0.95)
    assert spot.method == pot.method == "empirical" and spot.threshold == pot.threshold
    for x in np.linspace(0.5, 3.5, 8):  # new peaks until N_t >= 10 distinct excesses
        spot.update(float(x))
    assert spot.method == "gpd" and math.isfinite(spot.threshold)


def test_bad_input_is_refused():
    with pytest.raises(ValueError, match="risk"):
        StreamingPot(np.ones(10), 0.5, 0.98)
    with pytest.raises(ValueError, match="finite"):
        StreamingPot(np.array([1.0, np.nan]), RISK, LEVEL)
    with pytest.raises(ValueError, match="not finite"):
        StreamingPot(np.arange(100.0), 0.01, 0.9).update(math.nan)
