"""``lstm-vae``: an LSTM encoder over the window, one latent vector, an LSTM decoder.

q(z | x_1..x_T) from the last state of a forward LSTM; prior N(0, I); the decoder LSTM starts
from a state computed from z, reads z at every step and gives a Gaussian over each step
(per-channel mean and bounded variance). Loss: reconstruction NLL + beta * KL(q(z) || N(0, I)).
Score at t: NLL of the last point of the window ending at t.
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
    kl_standard_normal,
    reparameterize,
    training_params,
)


class LstmSequenceVae(nn.Module):
    """The network; see the module docstring."""

    def __init__(self, n_channels: int, hidden_size: int, latent_size: int) -> None:
        super().__init__()
        self.latent_size = latent_size
        self.encoder = nn.LSTM(n_channels, hidden_size, batch_first=True)
        self.latent_head = GaussianHead(hidden_size, latent_size, LATENT_LOGVAR)
        self.initial_state = nn.Linear(latent_size, 2 * hidden_size)
        self.decoder = nn.LSTM(latent_size, hidden_size, batch_first=True)
        self.output_head = GaussianHead(hidden_size, n_channels, OUTPUT_LOGVAR)

    def posterior(self, x: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        """Mean and log-variance of q(z | window), each (B, latent_size)."""
        _, (h, _) = self.encoder(x)
        return self.latent_head(h[-1])

    def decode(self, z: torch.Tensor, steps: int) -> tuple[torch.Tensor, torch.Tensor]:
        """Mean and log-variance of p(x_t | z) for t = 1..steps, each (B, steps, D)."""
        h0, c0 = torch.tanh(self.initial_state(z)).unsqueeze(0).chunk(2, dim=-1)
        inputs = z.unsqueeze(1).expand(-1, steps, -1)
        out, _ = self.decoder(inputs, (h0.contiguous(), c0.contiguous()))
        return self.output_head(out)

    def negative_elbo(
        self, x: torch.Tensor, beta: float, generator: torch.Generator | None
    ) -> torch.Tensor:
        """Reconstruction NLL + beta * KL per window, (B,)."""
        mean_z, logvar_z = self.posterior(x)
        z = reparameterize(mean_z, logvar_z, generator)
        mean_x, logvar_x = self.decode(z, x.shape[1])
        kl = kl_standard_normal(mean_z, logvar_z).sum(dim=1)
        return gaussian_nll(x, mean_x, logvar_x).sum(dim=(1, 2)) + beta * kl

    def last_step_nll(
        self, x: torch.Tensor, samples: int, generator: torch.Generator | None,
        per_channel: bool = False,
    ) -> torch.Tensor:
        """NLL of each window's last point, (B,), from the posterior mean or ``samples`` draws;
        with ``per_channel`` each channel's term, (B, D)."""
        mean_z, logvar_z = self.posterior(x)
        last = x[:, -1].double()
        draws = [None] if samples == 0 else [
            torch.randn((1, self.latent_size), generator=generator) for _ in range(samples)
        ]
        total = torch.zeros(x.shape[0], *(last.shape[1:] if per_channel else ()),
                            dtype=torch.float64)  # fmt: skip
        for eps in draws:
            z = mean_z if eps is None else mean_z + torch.exp(0.5 * logvar_z) * eps
            mean_x, logvar_x = self.decode(z, x.shape[1])
            terms = gaussian_nll(last, mean_x[:, -1].double(), logvar_x[:, -1].double())
            total += terms if per_channel else terms.sum(dim=1)
        return total / len(draws)


@register
class LstmVaeDetector(TorchWindowDetector):
    """LSTM-VAE with one latent vector per window; score = NLL of the window's last point."""

    name = "lstm-vae"
    description = "LSTM encoder -> one Gaussian latent -> LSTM decoder; NLL of the last step"
    params = training_params() + (
        Param("latent_size", int, 8, "units of the latent vector", 1, 1024),
    )
    attributes = True  # each channel's NLL of the last point

    def build_model(self, n_channels: int) -> LstmSequenceVae:
        return LstmSequenceVae(n_channels, self.hidden_size, self.latent_size)
