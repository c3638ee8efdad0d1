"""Shared machinery of the deep (torch) detectors: CPU sessions, Gaussian terms, training, scoring.

Everything here runs on the CPU. A :func:`torch_session` fixes the thread count, seeds python,
numpy and torch and turns on deterministic algorithms, then puts every piece of global state back
on exit, so one seed gives the same scores bit for bit and other detectors see no change.

A model plugged into :class:`TorchWindowDetector` is a ``torch.nn.Module`` with two methods:

* ``negative_elbo(x, beta, generator) -> (B,)``: the loss of each window ``x`` (B, T, D), with the
  KL terms weighted by ``beta`` (the warm-up factor);
* ``last_step_nll(x, samples, generator) -> (B,)``: the negative log-likelihood of each window's
  last point; ``samples == 0`` decodes the posterior mean, otherwise it averages over ``samples``
  draws (the same draws for every window, so a score depends on its own window only).
  A model that also takes ``per_channel=True`` and then returns each channel's term ``(B, D)``
  (the terms sum to the score) lets its detector set ``attributes = True``.
"""

from __future__ import annotations

import copy
import json
import math
import os
import random
import sys
import tempfile
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import torch
from tqdm import tqdm

from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series
from benchkit.errors import DataError, ParamError
from benchkit.windows import sliding_windows

LOG_2PI = math.log(2.0 * math.pi)
# Decoder variances live in [1e-3, 1e2] (data are z-scored on train); latent ones in [e^-8, e^4].
OUTPUT_LOGVAR = (math.log(1e-3), math.log(1e2))
LATENT_LOGVAR = (-8.0, 4.0)
SCORE_CHUNK = 1024  # windows scored per forward pass: bounds memory for any series length
VALIDATION_CAP = 2048  # validation windows evaluated per epoch (evenly spaced)
FILE_FORMAT = "benchkit.torch-detector/1"


# --------------------------------------------------------------------------- sessions


def available_cores() -> int:
    """CPU cores this process may run on."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except AttributeError:  # pragma: no cover - not Linux
        return max(1, os.cpu_count() or 1)


@contextmanager
def torch_session(seed: int, threads: int = 0) -> Iterator[None]:
    """Seeded, deterministic CPU torch for the duration of a ``with`` block.

    Parameters
    ----------
    seed : seeds python's ``random``, numpy's legacy global generator and torch's CPU generator.
    threads : intra-op threads; 0 keeps the process's setting (torch's default is one thread
        per core; the experiment runner pins one per worker, so workers do not oversubscribe).

    Thread count, deterministic-algorithm mode and all three global random states are restored
    on exit.
    """
    old_threads = torch.get_num_threads()
    old_deterministic = torch.are_deterministic_algorithms_enabled()
    old_warn_only = torch.is_deterministic_algorithms_warn_only_enabled()
    old_python = random.getstate()
    old_numpy = np.random.get_state()
    torch.set_num_threads(threads if threads > 0 else old_threads)
    torch.use_deterministic_algorithms(True)
    try:
        with torch.random.fork_rng(devices=[]):
            random.seed(seed)
            np.random.seed(seed % 2**32)
            torch.manual_seed(seed)
            yield
    finally:
        torch.set_num_threads(old_threads)
        torch.use_deterministic_algorithms(old_deterministic, warn_only=old_warn_only)
        random.setstate(old_python)
        np.random.set_state(old_numpy)


def torch_generator(seed: int, stream: int) -> torch.Generator:
    """A torch generator seeded from ``numpy.random.default_rng([seed, stream])``."""
    child = np.random.default_rng([seed, stream]).integers(0, 2**62)
    return torch.Generator().manual_seed(int(child))


# --------------------------------------------------------------------------- Gaussian terms


def bounded_logvar(raw: torch.Tensor, bounds: tuple[float, float]) -> torch.Tensor:
    """Map an unconstrained tensor into ``bounds`` (log-variance) with a sigmoid."""
    low, high = bounds
    return low + (high - low) * torch.sigmoid(raw)


def gaussian_nll(x: torch.Tensor, mean: torch.Tensor, logvar: torch.Tensor) -> torch.Tensor:
    """Elementwise ``-log N(x | mean, exp(logvar))``."""
    return 0.5 * (LOG_2PI + logvar + (x - mean).square() * torch.exp(-logvar))


def kl_gaussians(
    mean_q: torch.Tensor, logvar_q: torch.Tensor, mean_p: torch.Tensor, logvar_p: torch.Tensor
) -> torch.Tensor:
    """Elementwise ``KL(N(mean_q, exp(logvar_q)) || N(mean_p, exp(logvar_p)))``."""
    spread = (torch.exp(logvar_q) + (mean_q - mean_p).square()) * torch.exp(-logvar_p)
    return 0.5 * (logvar_p - logvar_q + spread - 1.0)


def kl_standard_normal(mean: torch.Tensor, logvar: torch.Tensor) -> torch.Tensor:
    """Elementwise ``KL(N(mean, exp(logvar)) || N(0, 1))``."""
    return 0.5 * (torch.exp(logvar) + mean.square() - 1.0 - logvar)


def reparameterize(
    mean: torch.Tensor, logvar: torch.Tensor, generator: torch.Generator | None
) -> torch.Tensor:
    """A draw ``mean + sigma * eps`` (eps standard normal from ``generator``)."""
    eps = torch.randn(mean.shape, generator=generator, dtype=mean.dtype)
    return mean + torch.exp(0.5 * logvar) * eps


class GaussianHead(torch.nn.Module):
    """A linear layer giving the mean and bounded log-variance of a diagonal Gaussian."""

    def __init__(self, in_size: int, out_size: int, bounds: tuple[float, float]) -> None:
        super().__init__()
        self.linear = torch.nn.Linear(in_size, 2 * out_size)
        self.bounds = bounds

    def forward(self, h: torch.Tensor) -> tuple[torch.Tensor, torch.Tensor]:
        mean, raw = self.linear(h).chunk(2, dim=-1)
        return mean, bounded_logvar(raw, self.bounds)


# --------------------------------------------------------------------------- training


@dataclass(frozen=True)
class TrainSettings:
    """How :func:`train_on_windows` trains; built from a detector's hyperparameters."""

    window: int
    batch_size: int = 64
    max_epochs: int = 10
    patience: int = 2
    learning_rate: float = 3e-3
    kl_warmup_epochs: int = 3
    max_train_windows: int = 1024
    train_stride: int = 1
    validation_fraction: float = 0.15
    clip_norm: float = 5.0
    seed: int = 0
    progress: bool = False
    label: str = "fit"


STOP_PATIENCE = "patience"
STOP_MAX_EPOCHS = "max_epochs"
STOP_NON_FINITE = "non-finite"


@dataclass
class TrainHistory:
    """What happened during training (losses are mean negative ELBO per window at beta = 1).

    ``stop_reason`` is ``"patience"`` (no validation improvement for ``patience`` epochs),
    ``"max_epochs"`` (the epoch budget ran out) or ``"non-finite"`` (a loss overflowed);
    ``""`` before training. Epochs count from 0; the best epoch's weights are the ones kept.
    """

    train_loss: list[float] = field(default_factory=list)
    validation_loss: list[float] = field(default_factory=list)
    best_epoch: int = -1
    stopped_early: bool = False
    n_train_windows: int = 0
    n_validation_windows: int = 0
    stop_reason: str = ""
    windows_per_epoch: int = 0

    @property
    def stop_epoch(self) -> int:
        """The last epoch run (from 0); -1 before training."""
        return len(self.train_loss) - 1

    def to_dict(self) -> dict[str, Any]:
        return dict(self.__dict__)

    def record(self) -> dict[str, Any]:
        """The training record a cell stores: losses per epoch, where and why it stopped."""
        return {
            "train_loss": [float(v) for v in self.train_loss],
            "validation_loss": [float(v) for v in self.validation_loss],
            "best_epoch": int(self.best_epoch),
            "stop_epoch": int(self.stop_epoch),
            "stop_reason": self.stop_reason,
            "windows_per_epoch": int(self.windows_per_epoch),
            "n_train_windows": int(self.n_train_windows),
            "n_validation_windows": int(self.n_validation_windows),
        }


def split_train(train: np.ndarray, window: int, fraction: float) -> tuple[np.ndarray, np.ndarray]:
    """The fit part and the validation tail (the last ``fraction`` of steps).

    The tail is empty when it would hold no full window, or leave none for fitting.
    """
    n = len(train)
    n_val = int(round(fraction * n))
    if n_val < window or n - n_val < window:
        n_val = 0
    return train[: n - n_val], train[n - n_val :]


def kl_weight(epoch: int, warmup_epochs: int) -> float:
    """Linear KL warm-up: ``(epoch + 1) / warmup_epochs``, capped at 1 (epochs count from 0)."""
    return 1.0 if warmup_epochs <= 0 else min(1.0, (epoch + 1) / warmup_epochs)


def progress_enabled(requested: bool) -> bool:
    """A progress bar only when asked for and both output streams are terminals."""
    return bool(requested) and sys.stdout.isatty() and sys.stderr.isatty()


def window_batch(views: np.ndarray, index: np.ndarray) -> torch.Tensor:
    """The windows ``views[index]`` as one contiguous float32 tensor (copies just the batch)."""
    return torch.from_numpy(np.ascontiguousarray(views[index], dtype=np.float32))


def run_epoch(
    model: torch.nn.Module,
    views: np.ndarray,
    order: np.ndarray,
    optimizer: torch.optim.Optimizer,
    batch_size: int,
    beta: float,
    clip_norm: float,
    generator: torch.Generator,
) -> float:
    """One pass of Adam steps over ``views[order]`` in mini-batches; mean loss per window."""
    model.train()
    total = 0.0
    for start in range(0, len(order), batch_size):
        x = window_batch(views, order[start : start + batch_size])
        loss = model.negative_elbo(x, beta, generator).mean()
        optimizer.zero_grad(set_to_none=True)
        loss.backward()
        torch.nn.utils.clip_grad_norm_(model.parameters(), clip_norm)
        optimizer.step()
        total += float(loss.detach()) * len(x)
    return total / max(1, len(order))


def evaluate_loss(
    model: torch.nn.Module, views: np.ndarray, index: np.ndarray, seed: int, batch_size: int = 512
) -> float:
    """Mean negative ELBO (beta = 1) over ``views[index]``, with the same draws every call."""
    model.eval()
    generator = torch_generator(seed, 2)
    total = 0.0
    with torch.no_grad():
        for start in range(0, len(index), batch_size):
            x = window_batch(views, index[start : start + batch_size])
            total += float(model.negative_elbo(x, 1.0, generator).sum())
    return total / max(1, len(index))


def train_on_windows(
    model: torch.nn.Module, train: np.ndarray, settings: TrainSettings
) -> TrainHistory:
    """Fit ``model`` on windows of ``train`` (call inside :func:`torch_session`).

    Each epoch draws up to ``max_train_windows`` windows (strided views, without replacement) of
    the fit part, takes Adam steps with gradient clipping, then evaluates the validation tail.
    Training stops after ``patience`` epochs without improvement once the KL warm-up is over (or
    at ``max_epochs``) and the best epoch's weights are restored.
    """
    s = settings
    train32 = np.asarray(train, dtype=np.float32)
    fit_part, val_part = split_train(train32, s.window, s.validation_fraction)
    fit_views = sliding_windows(fit_part, s.window, s.train_stride)
    val_views = sliding_windows(val_part, s.window) if len(val_part) else fit_views
    n_val = len(val_views)
    val_index = np.unique(np.linspace(0, n_val - 1, min(n_val, VALIDATION_CAP)).astype(np.int64))
    history = TrainHistory(n_train_windows=len(fit_views), n_validation_windows=len(val_index),
                           windows_per_epoch=min(len(fit_views), s.max_train_windows))
    rng = np.random.default_rng([s.seed, 1])
    generator = torch_generator(s.seed, 3)
    optimizer = torch.optim.Adam(model.parameters(), lr=s.learning_rate)
    best_loss, best_state, waited = math.inf, None, 0
    epochs = tqdm(
        range(s.max_epochs), desc=s.label, unit="epoch", leave=False,
        disable=not progress_enabled(s.progress),
    )
    for epoch in epochs:
        order = rng.permutation(len(fit_views))[: s.max_train_windows]
        beta = kl_weight(epoch, s.kl_warmup_epochs)
        train_loss = run_epoch(
            model, fit_views, order, optimizer, s.batch_size, beta, s.clip_norm, generator
        )
        val_loss = evaluate_loss(model, val_views, val_index, s.seed)
        history.train_loss.append(train_loss)
        history.validation_loss.append(val_loss)
        epochs.set_postfix(train=f"{train_loss:.4g}", validation=f"{val_loss:.4g}")
        history.stop_reason = STOP_MAX_EPOCHS
        if not math.isfinite(val_loss):
            history.stop_reason = STOP_NON_FINITE
            break
        if val_loss < best_loss:
            best_loss, best_state, waited = val_loss, copy.deepcopy(model.state_dict()), 0
            history.best_epoch = epoch
        elif epoch + 1 >= s.kl_warmup_epochs:
            waited += 1
            if waited >= s.patience:
                history.stopped_early = True
                history.stop_reason = STOP_PATIENCE
                break
    epochs.close()
    if best_state is None:
        raise RuntimeError(f"{s.label}: training diverged (non-finite loss in the first epoch)")
    model.load_state_dict(best_state)
    model.eval()
    return history


# --------------------------------------------------------------------------- scoring


def score_last_points(
    series: np.ndarray,
    window: int,
    nll: Callable[[torch.Tensor], torch.Tensor],
    chunk: int = SCORE_CHUNK,
    channels: int | None = None,
) -> np.ndarray:
    """Per-step scores ``nll(window ending at t)``, chunk by chunk (call under ``no_grad``).

    Steps before the first full window get :data:`WARMUP_SCORE`. Only ``chunk`` windows exist
    as a float32 copy at any time, so memory does not grow with the series length beyond the
    (n,) result. With ``channels`` set, ``nll`` gives ``(B, channels)`` per-channel terms and
    the result is ``(n, channels)``.
    """
    n = len(series)
    out = np.full(n if channels is None else (n, channels), WARMUP_SCORE, dtype=np.float64)
    views = sliding_windows(series, window)
    for start in range(0, len(views), chunk):
        x = window_batch(views, slice(start, start + chunk))
        out[window - 1 + start : window - 1 + start + len(x)] = nll(x).double().numpy()
    return out


# --------------------------------------------------------------------------- detector base


def training_params(window: int = 32, hidden_size: int = 32) -> tuple[Param, ...]:
    """The hyperparameters every torch window detector shares (model sizes are added per model)."""
    return (
        Param("window", int, window, "steps per window (score at t uses t-window+1..t)", 2, 4096),
        Param("hidden_size", int, hidden_size, "LSTM hidden units", 1, 4096),
        Param("batch_size", int, 64, "windows per Adam step", 1, 65536),
        Param("max_epochs", int, 10, "most training epochs", 1, 10000),
        Param("patience", int, 2, "epochs without validation improvement before stopping", 1, 1000),
        Param("learning_rate", float, 3e-3, "Adam step size", 1e-7, 1.0),
        Param("kl_warmup_epochs", int, 3, "epochs until the KL weight is 1 (0 = none)", 0, 1000),
        Param("max_train_windows", int, 1024, "training windows drawn per epoch", 1, 10**9),
        Param("train_stride", int, 1, "step between training window starts", 1, 4096),
        Param("validation_fraction", float, 0.15, "train tail for early stopping", 0.0, 0.5),
        Param("clip_norm", float, 5.0, "gradient norm clipping threshold", 1e-6, 1e6),
        Param("score_samples", int, 0, "posterior draws per score (0 = posterior mean)", 0, 1000),
        Param("seed", int, 0, "random seed (python, numpy, torch)", 0, 2**63 - 1),
        Param("threads", int, 0, "torch CPU threads (0 = the process setting)", 0, 1024),
        Param("progress", bool, False, "per-epoch progress bar on a terminal"),
    )


class TorchWindowDetector(Detector):
    """Base of the deep detectors: fit/score/save/load around a window model.

    Subclasses set ``name``, ``description``, ``params`` and implement :meth:`build_model`.
    """

    needs_torch = True

    def build_model(self, n_channels: int) -> torch.nn.Module:  # pragma: no cover - interface
        raise NotImplementedError

    def train_settings(self) -> TrainSettings:
        names = TrainSettings.__dataclass_fields__.keys() - {"label"}
        return TrainSettings(label=self.name, **{k: getattr(self, k) for k in names})

    def fit(self, train: np.ndarray) -> TorchWindowDetector:
        """Train on an already scaled ``(n, d)`` series; returns ``self``."""
        x = check_series(train, "train")
        if len(x) < self.window:
            raise ParamError(
                f"{self.name}.window: {self.window} exceeds the train series ({len(x)} steps)"
            )
        with torch_session(self.seed, self.threads):
            model = self.build_model(x.shape[1])
            self.history_ = train_on_windows(model, x, self.train_settings())
        self.model_ = model
        self.n_channels_ = int(x.shape[1])
        return self

    def _fitted_model(self) -> torch.nn.Module:
        model = getattr(self, "model_", None)
        if model is None:
            raise RuntimeError(f"{self.name}: call fit() before score() or save()")
        return model

    def score(self, series: np.ndarray) -> np.ndarray:
        """NLL of the last point of the window ending at each step (``-inf`` in the warm-up)."""
        return self._last_points(series, per_channel=False)

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Each channel's NLL of the last point of the window ending at each step, ``(n, d)``
        (the terms of :meth:`score`); only for models that take ``per_channel``."""
        return self._last_points(series, per_channel=True)

    def _last_points(self, series: np.ndarray, per_channel: bool) -> np.ndarray:
        model = self._fitted_model()
        x = check_series(series, "series", self.n_channels_)
        extra = {"per_channel": True} if per_channel else {}
        with torch_session(self.seed, self.threads), torch.no_grad():
            model.eval()

            def last_nll(batch: torch.Tensor) -> torch.Tensor:
                # a fresh generator per chunk: every window sees the same posterior draws
                return model.last_step_nll(
                    batch, self.score_samples, torch_generator(self.seed, 4), **extra
                )

            return score_last_points(
                x, self.window, last_nll, channels=self.n_channels_ if per_channel else None
            )

    def training_record(self) -> dict[str, Any] | None:
        """Per-epoch losses and the stop epoch and reason of the last fit (``None`` unfitted)."""
        history = getattr(self, "history_", None)
        return None if history is None else history.record()

    def parameter_count(self) -> int:
        """Number of trainable weights of the fitted model."""
        return sum(p.numel() for p in self._fitted_model().parameters() if p.requires_grad)

    def save(self, path: str | os.PathLike) -> None:
        """Write the fitted state: tensors as a state dict, hyperparameters as JSON beside them.

        The file is written to a temporary name and moved into place, so a failed save leaves
        nothing half-written.
        """
        model = self._fitted_model()
        payload = {
            "format": FILE_FORMAT,
            "detector": self.name,
            "params": json.dumps(self.get_params(), sort_keys=True),
            "history": json.dumps(self.history_.to_dict()),
            "n_channels": self.n_channels_,
            "state": model.state_dict(),
        }
        target = Path(path)
        fd, tmp = tempfile.mkstemp(prefix=target.name + ".", suffix=".tmp", dir=target.parent)
        os.close(fd)
        try:
            torch.save(payload, tmp)
            os.replace(tmp, target)
        except BaseException:
            Path(tmp).unlink(missing_ok=True)
            raise

    @classmethod
    def load(cls, path: str | os.PathLike) -> TorchWindowDetector:
        """A fitted detector read back from :meth:`save` (``torch.load``, ``weights_only=True``)."""
        try:
            payload = torch.load(path, map_location="cpu", weights_only=True)
        except FileNotFoundError:
            raise DataError(f"{path}: no such file") from None
        except Exception as exc:
            raise DataError(f"{path}: not a saved benchkit model ({type(exc).__name__})") from None
        if not isinstance(payload, dict) or payload.get("format") != FILE_FORMAT:
            raise DataError(f"{path}: not a saved benchkit model (format {FILE_FORMAT} expected)")
        if payload.get("detector") != cls.name:
            raise DataError(f"{path}: holds a {payload.get('detector')!r} model, not {cls.name!r}")
        params = cls.validate_params(json.loads(payload["params"]), f"{path}: params")
        detector = cls(**params)
        model = detector.build_model(int(payload["n_channels"]))
        try:
            model.load_state_dict(payload["state"])
        except RuntimeError as exc:
            first = str(exc).splitlines()[0]
            raise DataError(f"{path}: weights do not match the hyperparameters ({first})") from None
        model.eval()
        detector.model_ = model
        detector.n_channels_ = int(payload["n_channels"])
        detector.history_ = TrainHistory(**json.loads(payload["history"]))
        return detector
