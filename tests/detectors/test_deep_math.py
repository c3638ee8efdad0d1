"""The Gaussian terms of the deep detectors against outside references (torch, scipy)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import torch
from scipy import stats

from detectors._torch import (
    LATENT_LOGVAR,
    OUTPUT_LOGVAR,
    bounded_logvar,
    gaussian_nll,
    kl_gaussians,
    kl_standard_normal,
    kl_weight,
    reparameterize,
    split_train,
)


def _random_gaussians(seed: int, shape: tuple[int, ...]) -> list[torch.Tensor]:
    g = torch.Generator().manual_seed(seed)
    mean_q = 2.0 * torch.randn(shape, generator=g, dtype=torch.float64)
    mean_p = torch.randn(shape, generator=g, dtype=torch.float64)
    logvar_q = torch.rand(shape, generator=g, dtype=torch.float64) * 6 - 3
    logvar_p = torch.rand(shape, generator=g, dtype=torch.float64) * 6 - 3
    return [mean_q, logvar_q, mean_p, logvar_p]


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_kl_between_gaussians_matches_torch_distributions(seed: int) -> None:
    mean_q, logvar_q, mean_p, logvar_p = _random_gaussians(seed, (5, 7, 3))
    ours = kl_gaussians(mean_q, logvar_q, mean_p, logvar_p)
    # reference: torch.distributions.kl_divergence for two Normal distributions (elementwise)
    q = torch.distributions.Normal(mean_q, torch.exp(0.5 * logvar_q))
    p = torch.distributions.Normal(mean_p, torch.exp(0.5 * logvar_p))
    expected = torch.distributions.kl_divergence(q, p)
    torch.testing.assert_close(ours, expected, rtol=1e-12, atol=1e-12)
    assert bool((ours >= 0).all())  # a KL divergence is never negative


@pytest.mark.parametrize("seed", [3, 4])
def test_kl_to_standard_normal_matches_torch_distributions(seed: int) -> None:
    mean_q, logvar_q, _, _ = _random_gaussians(seed, (11, 4))
    ours = kl_standard_normal(mean_q, logvar_q)
    # reference: torch.distributions.kl_divergence against Normal(0, 1)
    q = torch.distributions.Normal(mean_q, torch.exp(0.5 * logvar_q))
    p = torch.distributions.Normal(torch.zeros_like(mean_q), torch.ones_like(mean_q))
    expected = torch.distributions.kl_divergence(q, p)
    torch.testing.assert_close(ours, expected, rtol=1e-12, atol=1e-12)
    # and it is the general formula with the prior fixed at N(0, 1)
    zeros = torch.zeros_like(mean_q)
    torch.testing.assert_close(ours, kl_gaussians(mean_q, logvar_q, zeros, zeros))


def test_kl_of_a_multivariate_diagonal_gaussian_is_the_sum_over_units() -> None:
    mean_q, logvar_q, mean_p, logvar_p = _random_gaussians(5, (6, 4))
    # reference: torch.distributions.MultivariateNormal with diagonal covariances
    q = torch.distributions.MultivariateNormal(mean_q, torch.diag_embed(torch.exp(logvar_q)))
    p = torch.distributions.MultivariateNormal(mean_p, torch.diag_embed(torch.exp(logvar_p)))
    expected = torch.distributions.kl_divergence(q, p)
    ours = kl_gaussians(mean_q, logvar_q, mean_p, logvar_p).sum(dim=-1)
    torch.testing.assert_close(ours, expected, rtol=1e-10, atol=1e-10)


def test_gaussian_nll_equals_scipy_logpdf_summed() -> None:
    rng = np.random.default_rng(7)
    x = rng.normal(size=(4, 9, 5)) * 3
    mean = rng.normal(size=(4, 9, 5))
    logvar = rng.uniform(-4, 3, size=(4, 9, 5))
    t = [torch.from_numpy(a) for a in (x, mean, logvar)]
    ours = gaussian_nll(*t).sum(dim=(1, 2)).numpy()
    # reference: scipy.stats.norm.logpdf with scale = standard deviation, summed per window
    expected = -stats.norm.logpdf(x, loc=mean, scale=np.exp(0.5 * logvar)).sum(axis=(1, 2))
    np.testing.assert_allclose(ours, expected, rtol=1e-12)


def test_gaussian_nll_at_the_mean_of_a_unit_gaussian() -> None:
    # worked example from the normal density, by hand: -log N(0 | 0, 1) = log(2 pi) / 2
    zero = torch.zeros(1, dtype=torch.float64)
    assert gaussian_nll(zero, zero, zero).item() == pytest.approx(0.5 * math.log(2 * math.pi))


@pytest.mark.parametrize("bounds", [OUTPUT_LOGVAR, LATENT_LOGVAR])
def test_bounded_logvar_stays_inside_its_bounds(bounds: tuple[float, float]) -> None:
    raw = torch.tensor([-1e4, -5.0, 0.0, 5.0, 1e4], dtype=torch.float64)
    out = bounded_logvar(raw, bounds)
    assert bool((out >= bounds[0]).all()) and bool((out <= bounds[1]).all())
    assert bool((torch.diff(out) >= 0).all())  # monotone, so the mapping keeps the order
    assert out[2].item() == pytest.approx(sum(bounds) / 2)  # sigmoid(0) = 1/2


def test_reparameterized_draws_have_the_posterior_moments() -> None:
    # sanity check on draws (common practice: sample moments within a few standard errors)
    g = torch.Generator().manual_seed(0)
    mean = torch.full((200_000,), 1.5, dtype=torch.float64)
    logvar = torch.full((200_000,), math.log(0.25), dtype=torch.float64)
    draws = reparameterize(mean, logvar, g)
    assert draws.mean().item() == pytest.approx(1.5, abs=5 * 0.5 / math.sqrt(200_000))
    assert draws.std().item() == pytest.approx(0.5, rel=0.01)


def test_kl_warmup_rises_linearly_to_one() -> None:
    # the linear KL warm-up schedule (common practice in VAE training; no single source)
    assert [kl_weight(e, 4) for e in range(6)] == [0.25, 0.5, 0.75, 1.0, 1.0, 1.0]
    assert kl_weight(0, 0) == 1.0


def test_validation_is_the_train_tail_or_nothing() -> None:
    train = np.arange(200.0)[:, None]
    fit, val = split_train(train, window=10, fraction=0.15)
    assert len(val) == 30 and val[0, 0] == 170.0 and len(fit) == 170
    fit, val = split_train(train, window=40, fraction=0.15)  # 30 tail steps hold no window
    assert len(val) == 0 and len(fit) == 200


def test_factorized_vae_loss_equals_its_definition_written_with_torch_distributions() -> None:
    """Pins what one training step of the factorized VAE computes (any speed-up must keep it).

    reference: the loss of the module docstring, NLL + beta * (KL(q(s) || N(0, I)) + sum_t
    KL(q(z_t) || p(z_t | z_<t))), composed here from torch.distributions.Normal's log_prob and
    kl_divergence, with the model's own layers and the same random draws.
    """
    from detectors.factorized_vae import FactorizedSequenceVae

    torch.manual_seed(3)
    model = FactorizedSequenceVae(5, 8, static_size=3, dynamic_size=2, learned_prior=True)
    x = torch.randn(4, 6, 5)
    beta = 0.7
    got = model.negative_elbo(x, beta, torch.Generator().manual_seed(11))

    g = torch.Generator().manual_seed(11)
    normal, kl = torch.distributions.Normal, torch.distributions.kl_divergence
    _, (h, _) = model.static_rnn(x)
    mean_s, logvar_s = model.static_head(torch.cat([h[0], h[1]], dim=-1))
    s = mean_s + torch.exp(0.5 * logvar_s) * torch.randn(mean_s.shape, generator=g)
    q_s = normal(mean_s, torch.exp(0.5 * logvar_s))
    kl_s = kl(q_s, normal(torch.zeros_like(mean_s), torch.ones_like(mean_s))).sum(1)
    h_z, _ = model.dynamic_rnn(torch.cat([x, s[:, None].expand(-1, 6, -1)], dim=-1))
    mean_z, logvar_z = model.dynamic_head(h_z)
    z = mean_z + torch.exp(0.5 * logvar_z) * torch.randn(mean_z.shape, generator=g)
    h_p, _ = model.prior_rnn(torch.cat([torch.zeros_like(z[:, :1]), z[:, :-1]], dim=1))
    mean_p, logvar_p = model.prior_head(h_p)
    kl_z = kl(normal(mean_z, torch.exp(0.5 * logvar_z)),
              normal(mean_p, torch.exp(0.5 * logvar_p))).sum((1, 2))  # fmt: skip
    mean_x, logvar_x = model.output_head(
        model.decoder(torch.cat([s[:, None].expand(-1, 6, -1), z], dim=-1))
    )
    nll = -normal(mean_x, torch.exp(0.5 * logvar_x)).log_prob(x).sum((1, 2))
    expected = nll + beta * (kl_s + kl_z)
    torch.testing.assert_close(got, expected, rtol=1e-5, atol=1e-4)
