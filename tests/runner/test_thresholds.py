"""POT/SPOT and quantile thresholds against independent computations."""

import math

import numpy as np
import pytest
from scipy import stats

from benchkit.thresholds import (
    calibration_scores,
    fit_gpd,
    pot_threshold,
    quantile_threshold,
    spot_threshold,
)


def test_spot_formula_worked_example():
    # worked example from eq. (1) of Siffer et al., KDD 2017, computed by hand:
    # t = 1, sigma = 0.5, gamma = 0.2, q = 1e-3, n = 1000, N_t = 20 -> q n / N_t = 0.05,
    # 0.05 ** -0.2 = exp(0.2 ln 20) = 1.820564, z = 1 + 2.5 * 0.820564 = 3.051410
    assert spot_threshold(1.0, 0.2, 0.5, 1e-3, 1000, 20) == pytest.approx(3.051410, abs=1e-6)
    # gamma -> 0 limit (exponential tail), by hand: z = 1 - 0.5 ln 0.05 = 2.497866
    assert spot_threshold(1.0, 0.0, 0.5, 1e-3, 1000, 20) == pytest.approx(2.497866, abs=1e-6)


@pytest.mark.parametrize("shape", [-0.25, 0.0, 0.3])
def test_gpd_fit_matches_scipy_genpareto(shape):
    # reference: scipy.stats.genpareto.fit with the location fixed at 0 (independent optimiser)
    rng = np.random.default_rng(7)
    y = stats.genpareto.rvs(shape, scale=1.5, size=600, random_state=rng)
    y = y[y > 0]
    gamma, sigma = fit_gpd(y)
    ref_c, _, ref_scale = stats.genpareto.fit(y, floc=0)
    assert gamma == pytest.approx(ref_c, abs=2e-3)
    assert sigma == pytest.approx(ref_scale, rel=2e-3)
    ours = stats.genpareto.logpdf(y, gamma, scale=sigma).sum()
    theirs = stats.genpareto.logpdf(y, ref_c, scale=ref_scale).sum()
    assert ours >= theirs - 1e-6  # our maximum is at least as high as scipy's


def test_pot_threshold_equals_independent_genpareto_computation():
    # reference: the SPOT threshold written as the GPD quantile of scipy.stats.genpareto:
    # P(X > z) = (N_t / n) * genpareto.sf(z - t) = q  =>  z = t + genpareto.isf(q n / N_t)
    rng = np.random.default_rng(3)
    scores = stats.gamma.rvs(2.0, size=20_000, random_state=rng)
    q, level = 1e-4, 0.98
    result = pot_threshold(scores, risk=q, initial_quantile=level)
    t = np.quantile(scores, level)
    excesses = scores[scores > t] - t
    c, _, scale = stats.genpareto.fit(excesses, floc=0)
    expected = t + stats.genpareto.isf(q * scores.size / excesses.size, c, scale=scale)
    assert result.method == "gpd"
    assert result.initial_threshold == pytest.approx(t)
    assert result.n_excesses == excesses.size
    assert result.threshold == pytest.approx(expected, rel=2e-3)


def test_pot_extrapolates_an_exponential_tail():
    # reference: the exact quantile of Exp(1), scipy.stats.expon.isf(q) = -ln q; POT estimates
    # it from the top 2% of 50,000 draws, so a sampling tolerance of 10% is allowed
    rng = np.random.default_rng(11)
    scores = rng.exponential(size=50_000)
    q = 1e-4
    result = pot_threshold(scores, risk=q, initial_quantile=0.98)
    assert result.threshold == pytest.approx(stats.expon.isf(q), rel=0.10)
    assert result.threshold > np.quantile(scores, 0.999)  # beyond what the data show directly


def test_pot_falls_back_on_a_tied_tail():
    # common practice (no source): with almost no distinct excesses a GPD fit is meaningless;
    # the empirical 1 - q quantile (numpy.quantile) is used instead and flagged
    scores = np.zeros(1000)
    scores[-5:] = 1.0
    result = pot_threshold(scores, risk=1e-3, initial_quantile=0.98)
    assert result.method == "empirical"
    assert result.threshold == np.quantile(scores, 1 - 1e-3)
    assert math.isnan(result.gamma)


def test_pot_rejects_a_risk_above_the_tail_fraction():
    with pytest.raises(ValueError, match="risk"):
        pot_threshold(np.arange(100.0), risk=0.05, initial_quantile=0.98)


def test_calibration_drops_warmup_and_non_finite_scores():
    scores = np.array([-np.inf, -np.inf, 1.0, np.nan, 3.0, 2.0])
    assert calibration_scores(scores, 2).tolist() == [1.0, 3.0, 2.0]


def test_quantile_threshold_is_numpy_quantile():
    # reference: numpy.quantile (linear interpolation)
    x = np.random.default_rng(0).normal(size=501)
    assert quantile_threshold(x, 0.99) == np.quantile(x, 0.99)
    with pytest.raises(ValueError):
        quantile_threshold(np.array([]), 0.5)
