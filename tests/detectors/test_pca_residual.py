"""pca-residual against scikit-learn's PCA, and its control limits against the published
formulas (Jackson & Mudholkar 1979; Box 1954; Hotelling T² with the F distribution), evaluated
independently with scipy and checked by Monte Carlo against the distribution they approximate."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from sklearn.decomposition import PCA

from benchkit import registry
from detectors.pca_residual import q_control_limit, t2_control_limit


@pytest.fixture
def data():
    rng = np.random.default_rng(7)
    latent = rng.normal(size=(800, 3))
    mixing = rng.normal(size=(3, 8))
    train = latent @ mixing + 0.2 * rng.normal(size=(800, 8))
    test = rng.normal(size=(300, 3)) @ mixing + 0.2 * rng.normal(size=(300, 8))
    test[100:110, 2] += 3.0  # one channel leaves the learned subspace
    return train, test


def test_q_equals_sklearn_inverse_transform_residuals(data):
    train, test = data
    det = registry.create("pca-residual", n_components=3).fit(train)
    # reference: sklearn.decomposition.PCA reconstruction x_hat = inverse_transform(transform(x))
    pca = PCA(n_components=3, svd_solver="full").fit(train)
    resid = test - pca.inverse_transform(pca.transform(test))
    np.testing.assert_allclose(det.score(test), (resid**2).sum(axis=1), rtol=1e-8, atol=1e-10)


def test_component_count_by_variance_matches_sklearn(data):
    train, _ = data
    for target in (0.5, 0.8, 0.95):
        det = registry.create("pca-residual", variance=target).fit(train)
        # reference: sklearn PCA with a fractional n_components picks the same count
        reference = PCA(n_components=target, svd_solver="full").fit(train)
        assert det.n_components_ == reference.n_components_


def test_t2_equals_sklearn_scores_over_explained_variance(data):
    train, test = data
    det = registry.create("pca-residual", n_components=3, statistic="t2").fit(train)
    pca = PCA(n_components=3, svd_solver="full").fit(train)
    # reference: Hotelling's T² = sum of squared PCA scores divided by the component variances
    expected = (pca.transform(test) ** 2 / pca.explained_variance_).sum(axis=1)
    np.testing.assert_allclose(det.score(test), expected, rtol=1e-8)


def _jackson_mudholkar(eigenvalues, alpha):
    # the 1979 formula written out directly, every step with numpy/scipy
    t1, t2, t3 = (np.sum(eigenvalues**p) for p in (1, 2, 3))
    h0 = 1 - (2 * t1 * t3) / (3 * t2 * t2)
    z = stats.norm.isf(alpha)
    bracket = z * np.sqrt(2 * t2 * h0 * h0) / t1 + 1 + t2 * h0 * (h0 - 1) / (t1 * t1)
    return t1 * bracket ** (1 / h0)


def test_q_limit_matches_the_jackson_mudholkar_formula(data):
    train, _ = data
    det = registry.create("pca-residual", n_components=3, alpha=0.01).fit(train)
    # independent route to the residual eigenvalues: eigvalsh of numpy's sample covariance
    eig = np.sort(np.linalg.eigvalsh(np.cov(train, rowvar=False)))[::-1][3:]
    assert det.threshold_hint(det.score(train)) == pytest.approx(_jackson_mudholkar(eig, 0.01),
                                                                 rel=1e-9)  # fmt: skip


def test_q_limit_is_the_quantile_of_a_weighted_chi_square_sum():
    # Q of Gaussian data is sum(lambda_j * z_j^2); its 99% quantile by Monte Carlo (common
    # practice for validating the approximation). From memory: the approximation is slightly
    # conservative with few residual components, within about 1% with twenty as here.
    lam = np.tile([0.8, 0.5, 0.3, 0.2, 0.1], 4)
    z = np.random.default_rng(0).normal(size=(400_000, lam.size))
    empirical = np.quantile((z**2 * lam).sum(axis=1), 0.99)
    assert q_control_limit(lam, 0.01) == pytest.approx(empirical, rel=0.03)
    assert q_control_limit(lam, 0.01) == pytest.approx(_jackson_mudholkar(lam, 0.01), rel=1e-12)


def test_box_approximation_where_jackson_mudholkar_is_undefined():
    lam = np.array([1.0] + [0.1] * 100)  # h0 < 0 here: 1 - 2*11*1.1/(3*4)
    theta1, theta2 = lam.sum(), (lam**2).sum()
    g, h = theta2 / theta1, theta1**2 / theta2
    # reference: Box (1954) g * chi2_h quantile via scipy.stats.chi2
    assert q_control_limit(lam, 0.01) == pytest.approx(g * stats.chi2.isf(0.01, h), rel=1e-12)
    # Box's approximation matches the first two moments only; from memory its far tail is
    # off by several percent for a dominant eigenvalue (about 6% here), hence the loose bound
    z = np.random.default_rng(1).normal(size=(100_000, lam.size))
    assert q_control_limit(lam, 0.01) == pytest.approx(
        np.quantile((z**2 * lam).sum(axis=1), 0.99), rel=0.10
    )


def test_t2_limit_matches_the_f_distribution_formula(data):
    train, _ = data
    det = registry.create("pca-residual", n_components=3, statistic="t2", alpha=0.05).fit(train)
    k, n = 3, train.shape[0]
    # reference: T² limit for a new observation, k(n-1)(n+1)/(n(n-k)) F_{k,n-k}, scipy.stats.f
    expected = k * (n - 1) * (n + 1) / (n * (n - k)) * stats.f.isf(0.05, k, n - k)
    assert det.threshold_hint(None) == pytest.approx(expected, rel=1e-12)
    assert t2_control_limit(0, n, 0.05) is None


def test_combined_statistic_divides_each_by_its_limit(data):
    train, test = data
    q_det = registry.create("pca-residual", n_components=3).fit(train)
    t_det = registry.create("pca-residual", n_components=3, statistic="t2").fit(train)
    c_det = registry.create("pca-residual", n_components=3, statistic="combined").fit(train)
    expected = q_det.score(test) / q_det.q_limit_ + t_det.score(test) / t_det.t2_limit_
    np.testing.assert_allclose(c_det.score(test), expected, rtol=1e-12)
    assert c_det.threshold_hint(None) is None


def test_q_flags_a_point_that_leaves_the_subspace(data):
    # sanity check on invented data: the shifted steps exceed the Q control limit
    train, test = data
    det = registry.create("pca-residual", n_components=3).fit(train)
    scores, limit = det.score(test), det.threshold_hint(None)
    assert np.all(scores[100:110] > limit)
    assert np.mean(np.delete(scores, range(100, 110)) > limit) < 0.05


def test_single_channel_scores_the_squared_deviation():
    train = np.random.default_rng(2).normal(size=(200, 1))
    det = registry.create("pca-residual").fit(train)
    assert det.n_components_ == 0
    np.testing.assert_allclose(det.score(train), (train[:, 0] - train.mean()) ** 2, rtol=1e-12)
