"""PCA residual detector: Q (squared prediction error), optionally with Hotelling's T².

PCA is fitted on the (already scaled) training points. For a point x with centred value
``c = x - mean``, the residual is ``c - P Pᵀ c`` (P: the k retained loadings) and
``Q = |c - P Pᵀ c|²``; Hotelling's ``T² = Σ_i (p_iᵀ c)² / λ_i`` over the retained components.
Each step is scored from its own point, so the score is causal with no warm-up.

Attribution (per channel j, summing to the score): for Q, the channel's squared residual
``(c - P Pᵀ c)_j²``; for T², the contribution ``c_j Σ_a p_ja t_a / λ_a`` (t = Pᵀ c), after
Westerhuis, Gurden & Smilde (2000) for the variable contributions to T²; ``combined`` adds the two,
each divided by its limit as in the score.

Control limits (``alpha`` = false-alarm rate):
* Q: Jackson & Mudholkar (1979), with ``θ_i = Σ_{j>k} λ_j^i`` and ``h0 = 1 - 2θ1θ3 / (3θ2²)``;
  where ``h0 <= 0`` the formula is undefined and Box's (1954) ``g χ²_h`` approximation with
  ``g = θ2/θ1``, ``h = θ1²/θ2`` is used instead.
* T²: ``k (n-1)(n+1) / (n (n-k)) F_{1-alpha}(k, n-k)`` (n training points).
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from benchkit.detector import Detector, Param, check_series
from benchkit.persist import SavesArrays
from benchkit.registry import register

_EIG_FLOOR = 1e-12  # eigenvalues below this (relative to the largest) count as zero


def q_control_limit(residual_eigenvalues: np.ndarray, alpha: float) -> float | None:
    """Jackson–Mudholkar upper control limit of Q at false-alarm rate ``alpha``.

    Parameters
    ----------
    residual_eigenvalues : covariance eigenvalues of the discarded components.
    alpha : false-alarm rate in (0, 1).

    Returns
    -------
    The limit, or ``None`` when the residual space carries no variance.
    """
    lam = np.asarray(residual_eigenvalues, dtype=np.float64)
    theta1, theta2, theta3 = (float(np.sum(lam**i)) for i in (1, 2, 3))
    if theta1 <= 0 or theta2 <= 0:
        return None
    h0 = 1.0 - 2.0 * theta1 * theta3 / (3.0 * theta2**2)
    if h0 > 0:
        c_alpha = stats.norm.ppf(1.0 - alpha)
        base = (
            c_alpha * np.sqrt(2.0 * theta2 * h0**2) / theta1
            + 1.0
            + theta2 * h0 * (h0 - 1.0) / theta1**2
        )
        if base > 0:
            return float(theta1 * base ** (1.0 / h0))
    g, h = theta2 / theta1, theta1**2 / theta2
    return float(g * stats.chi2.ppf(1.0 - alpha, h))


def t2_control_limit(n_components: int, n_train: int, alpha: float) -> float | None:
    """Hotelling T² upper control limit for new observations (F distribution based)."""
    k, n = n_components, n_train
    if k < 1 or n <= k:
        return None
    return float(k * (n - 1) * (n + 1) / (n * (n - k)) * stats.f.ppf(1.0 - alpha, k, n - k))


@register
class PCAResidual(SavesArrays, Detector):
    """Squared prediction error after projecting onto the leading principal components."""

    name = "pca-residual"
    description = "PCA squared prediction error (Q), optionally combined with Hotelling's T²"
    params = (
        Param("variance", float, 0.9, "keep components up to this explained variance",
              low=0.01, high=1.0),
        Param("n_components", int, None, "keep this many components (overrides variance)",
              low=0, nullable=True),
        Param("statistic", str, "q", "q, t2, or combined (each divided by its limit, summed)",
              choices=("q", "t2", "combined")),
        Param("alpha", float, 0.01, "false-alarm rate of the control limits",
              low=1e-6, high=0.5),
    )
    fitted_state = ("mean_", "eigenvalues_", "n_components_", "loadings_", "n_train_",
                    "q_limit_", "t2_limit_")  # fmt: skip
    attributes = True

    def fit(self, train: np.ndarray) -> PCAResidual:
        train = check_series(train, "train")
        n, d = train.shape
        if n < 2:
            raise ValueError("train: PCA needs at least 2 steps")
        self.mean_ = train.mean(axis=0)
        _, sing, vt = np.linalg.svd(train - self.mean_, full_matrices=False)
        eig = sing**2 / (n - 1)
        eig = np.where(eig > _EIG_FLOOR * max(eig[0], _EIG_FLOOR), eig, 0.0)
        self.eigenvalues_ = np.concatenate([eig, np.zeros(d - eig.size)])
        k = self._choose_k(eig, d)
        self.n_components_ = k
        self.loadings_ = vt[:k].T  # (d, k)
        self.n_train_ = n
        self.q_limit_ = q_control_limit(self.eigenvalues_[k:], self.alpha)
        self.t2_limit_ = t2_control_limit(k, n, self.alpha)
        return self

    def _choose_k(self, eig: np.ndarray, d: int) -> int:
        if self.n_components is not None:
            return min(self.n_components, d)
        total = eig.sum()
        if total <= 0:
            return 0
        cumulative = np.cumsum(eig) / total
        k = int(np.searchsorted(cumulative, self.variance - 1e-12) + 1)
        return min(k, d - 1) if d > 1 else 0  # leave a residual space to score

    def statistics(self, series: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Q and T² of every step of ``series`` (each ``(n,)`` float64)."""
        series = check_series(series, "series", self.mean_.size)
        centred = series - self.mean_
        proj = centred @ self.loadings_  # (n, k)
        resid = centred - proj @ self.loadings_.T
        q = np.einsum("ij,ij->i", resid, resid)
        kept = self.eigenvalues_[: self.n_components_]
        safe = np.where(kept > 0, kept, np.inf)
        t2 = np.einsum("ij,ij->i", proj / safe, proj)
        return q, t2

    def score(self, series: np.ndarray) -> np.ndarray:
        q, t2 = self.statistics(series)
        if self.statistic == "q":
            return q
        if self.statistic == "t2":
            return t2
        q_lim = self.q_limit_ or 1.0
        t2_lim = self.t2_limit_ or 1.0
        return q / q_lim + t2 / t2_lim

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Per-channel shares of the chosen statistic (see the module docstring)."""
        series = check_series(series, "series", self.mean_.size)
        centred = series - self.mean_
        proj = centred @ self.loadings_
        resid = centred - proj @ self.loadings_.T
        q_part = resid * resid
        if self.statistic == "q":
            return q_part
        kept = self.eigenvalues_[: self.n_components_]
        safe = np.where(kept > 0, kept, np.inf)
        t2_part = centred * ((proj / safe) @ self.loadings_.T)
        if self.statistic == "t2":
            return t2_part
        return q_part / (self.q_limit_ or 1.0) + t2_part / (self.t2_limit_ or 1.0)

    def threshold_hint(self, train_scores: np.ndarray) -> float | None:
        """The control limit of the chosen statistic (``None`` for ``combined``)."""
        if self.statistic == "q":
            return self.q_limit_
        if self.statistic == "t2":
            return self.t2_limit_
        return None
