"""``factorized-vae``: a sequential VAE whose latent space splits into a static and a dynamic part.

After the idea of Li & Mandt (ICML 2018, "Disentangled Sequential Autoencoder"), designed here
for KPI windows x_1..x_T:

* static latent s (one per window): q(s | x_1..x_T) from a bidirectional LSTM over the window,
  prior N(0, I);
* dynamic latents z_t (one per step): q(z_t | x_1..x_t, s) from a forward LSTM over the window
  with s appended to every input, prior p(z_t | z_<t) from an LSTM over the previous draws;
* decoder: a Gaussian p(x_t | s, z_t) with per-channel mean and bounded variance, from a small
  MLP applied step by step;
* loss: reconstruction NLL + beta * (KL(q(s) || N(0, I)) + sum_t KL(q(z_t) || p(z_t | z_<t))).

Ablation switches: ``static_latent=False`` drops s (dynamic latents only); ``prior="standard"``
replaces the learned recurrent prior by N(0, I) at every step.
"""

from __future__ import annotations

import torch
from torch import nn

from benchkit.detector import Param
from benchkit.registry import register
from detectors._torch import (
    LATENT_LOGVAR,
    OUTPUT_LOGVAR,
    GaussianHead,
    TorchWindowDetector,
    gaussian_nll,
    kl_gaussians,
    kl_standard_normal,
    reparameterize,
    training_params,
)


class FactorizedSequenceVae(nn.Module):
    """The network; see the module docstring. ``static_size = 0`` means no static latent."""

    def __init__(
        self, n_channels: int, hidden_size: int, static_size: int, dynamic_size: int,
        learned_prior: bool,
    ) -> None:
        super().__init__()
        self.static_size = static_size
        self.dynamic_size = dynamic_size
        self.learned_prior = learned_prior
        if static_size:
            self.static_rnn = nn.LSTM(n_channels, hidden_size, batch_first=True, bidirectional=True)
            self.static_head = GaussianHead(2 * hidden_size, static_size, LATENT_LOGVAR)
        self.dynamic_rnn = nn.LSTM(n_channels + static_size, hidden_size, batch_first=True)
        self.dynamic_head = GaussianHead(hidden_size, dynamic_size, LATENT_LOGVAR)
        if learned_prior:
            self.prior_rnn = nn.LSTM(dynamic_size, hidden_size, batch_first=True)
            self.prior_head = GaussianHead(hidden_size, dynamic_size, LATENT_LOGVAR)
        self.decoder = nn.Sequential(nn.Linear(static_size + dynamic_size, hidden_size), nn.Tanh())
        self.output_head = GaussianHead(hidden_size, n_channels, OUTPUT_LOGVAR)

    def static_posterior(self, x: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """Mean and log-variance of q(s | window), each (B, static_size)."""
        _, (h, _) = self.static_rnn(x)  # h: (2, B, H), the last forward and first backward state
        return self.static_head(torch.cat([h[0], h[1]], dim=-1))

    def dynamic_posterior(
        self, x: torch.Tensor, s: torch.Tensor | None
    ) -> tuple[torch.Tensor, torch.Tensor]:
        """Mean and log-variance of q(z_t | x_<=t, s), each (B, T, dynamic_size)."""
        if s is not None:
            x = torch.cat([x, s.unsqueeze(1).expand(-1, x.shape[1], -1)], dim=-1)
        h, _ = self.dynamic_rnn(x)
        return self.dynamic_head(h)

    def decode(
        self, s: torch.Tensor | None, z: torch.Tensor
    ) -> tuple[torch.Tensor, torch.Tensor]:
        """Mean and log-variance of p(x_t | s, z_t) for z of shape (B, T', dynamic_size)."""
        if s is not None:
            z = torch.cat([s.unsqueeze(1).expand(-1, z.shape[1], -1), z], dim=-1)
        return self.output_head(self.decoder(z))

    def dynamic_kl(
        self, z: torch.Tensor, mean_q: torch.Tensor, logvar_q: torch.Tensor
    ) -> torch.Tensor:
        """Sum over steps and units of KL(q(z_t) || prior), per window (B,)."""
        if not self.learned_prior:
            return kl_standard_normal(mean_q, logvar_q).sum(dim=(1, 2))
        previous = torch.cat([torch.zeros_like(z[:, :1]), z[:, :-1]], dim=1)  # z_0 = 0
        h, _ = self.prior_rnn(previous)
        mean_p, logvar_p = self.prior_head(h)
        return kl_gaussians(mean_q, logvar_q, mean_p, logvar_p).sum(dim=(1, 2))

    def negative_elbo(
        self, x: torch.Tensor, beta: float, generator: torch.Generator | None
    ) -> torch.Tensor:
        """Reconstruction NLL + beta * KL per window, (B,)."""
        s, kl = None, 0.0
        if self.static_size:
            mean_s, logvar_s = self.static_posterior(x)
            s = reparameterize(mean_s, logvar_s, generator)
            kl = kl_standard_normal(mean_s, logvar_s).sum(dim=1)
        mean_z, logvar_z = self.dynamic_posterior(x, s)
        z = reparameterize(mean_z, logvar_z, generator)
        kl = kl + self.dynamic_kl(z, mean_z, logvar_z)
        mean_x, logvar_x = self.decode(s, z)
        return gaussian_nll(x, mean_x, logvar_x).sum(dim=(1, 2)) + beta * kl

    def last_step_nll(
        self, x: torch.Tensor, samples: int, generator: torch.Generator | None,
        per_channel: bool = False,
    ) -> torch.Tensor:
        """NLL of each window's last point, (B,), from the posterior mean or ``samples`` draws;
        with ``per_channel`` each channel's term, (B, D)."""
        if samples == 0:
            return self._last_nll(x, None, None, per_channel)
        b = x.shape[0]
        total = torch.zeros(b, *((x.shape[2],) if per_channel else ()), dtype=torch.float64)
        for _ in range(samples):
            eps_s = torch.randn((1, self.static_size), generator=generator).expand(b, -1)
            eps_z = torch.randn((1, 1, self.dynamic_size), generator=generator).expand(b, 1, -1)
            total += self._last_nll(x, eps_s, eps_z, per_channel)
        return total / samples

    def _last_nll(
        self, x: torch.Tensor, eps_s: torch.Tensor | None, eps_z: torch.Tensor | None,
        per_channel: bool = False,
    ) -> torch.Tensor:
        s = None
        if self.static_size:
            mean_s, logvar_s = self.static_posterior(x)
            s = mean_s if eps_s is None else mean_s + torch.exp(0.5 * logvar_s) * eps_s
        mean_z, logvar_z = self.dynamic_posterior(x, s)
        mean_z, logvar_z = mean_z[:, -1:], logvar_z[:, -1:]
        z = mean_z if eps_z is None else mean_z + torch.exp(0.5 * logvar_z) * eps_z
        mean_x, logvar_x = self.decode(s, z)
        last = x[:, -1:].double()
        terms = gaussian_nll(last, mean_x.double(), logvar_x.double())
        return terms[:, 0] if per_channel else terms.sum(dim=(1, 2))


@register
class FactorizedVaeDetector(TorchWindowDetector):
    """Sequential VAE with static + dynamic latents; score = NLL of the window's last point."""

    name = "factorized-vae"
    description = (
        "sequential VAE with a static (per-window) and dynamic (per-step) latent space, "
        "learned recurrent prior (Li & Mandt 2018)"
    )
    params = training_params() + (
        Param("static_size", int, 4, "units of the static latent s", 1, 1024),
        Param("dynamic_size", int, 4, "units of each dynamic latent z_t", 1, 1024),
        Param("static_latent", bool, True, "use the static latent (False = dynamic latents only)"),
        Param("prior", str, "learned", "prior on z_t: recurrent p(z_t | z_<t) or N(0, I)",
              choices=("learned", "standard")),
    )
    attributes = True  # each channel's NLL of the last point

    def build_model(self, n_channels: int) -> FactorizedSequenceVae:
        return FactorizedSequenceVae(
            n_channels, self.hidden_size, self.static_size if self.static_latent else 0,
            self.dynamic_size, self.prior == "learned",
        )
