"""Speed and memory of the deep detectors, measured side by side in one run.

Prints, for a 20,000 x 38 train series at the default window and hidden sizes:

1. seconds per training epoch (the default epoch: ``max_train_windows`` windows in mini-batches
   of ``batch_size``, Adam with gradient clipping) of ``factorized-vae``, ``lstm-vae`` and a
   minimal reference written here, a bidirectional LSTM autoencoder of the same hidden size and
   window; the medians of interleaved repeats and their ratios to the reference, against the
   targets (factorized-vae <= 2.5x, lstm-vae <= 1.5x);
2. scoring throughput in points per second;
3. peak resident memory while scoring 100,000 and 1,000,000 steps of 38 channels, each in a
   fresh process (so the two peaks are comparable): chunked scoring keeps the extra memory
   above the input series flat instead of growing with the length;
4. the cost of the pinned numeric path (``[execution] numerics = "pinned"``, the default):
   seconds per epoch and scoring seconds of both deep detectors in fresh worker processes
   started pinned and unpinned ("fast"), alternated, and their ratio pinned / fast.
   ``--numerics-only`` runs just this part.

The data are an invented scenario (seeded sinusoids plus noise), only for timing.
Run: ``.venv/bin/python benchmarks/deep_speed.py`` (about 3-5 minutes on 2 cores), or with
``--quick`` for a smaller smoke run.
"""

from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import torch
from torch import nn

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from benchkit import numerics, registry  # noqa: E402
from benchkit.windows import sliding_windows  # noqa: E402
from detectors._torch import (  # noqa: E402
    available_cores,
    run_epoch,
    torch_generator,
    torch_session,
)

N_CHANNELS = 38
TARGET_RATIO = {"factorized-vae": 2.5, "lstm-vae": 1.5}


class BidirectionalLstmAutoencoder(nn.Module):
    """Reference model: BiLSTM encoder -> code -> LSTM decoder -> linear output, squared error."""

    def __init__(self, n_channels: int, hidden_size: int) -> None:
        super().__init__()
        self.encoder = nn.LSTM(n_channels, hidden_size, batch_first=True, bidirectional=True)
        self.code = nn.Linear(2 * hidden_size, hidden_size)
        self.decoder = nn.LSTM(hidden_size, hidden_size, batch_first=True)
        self.output = nn.Linear(hidden_size, n_channels)

    def negative_elbo(self, x: torch.Tensor, beta: float, generator: object) -> torch.Tensor:
        """Squared reconstruction error per window (the name lets ``run_epoch`` drive it)."""
        _, (h, _) = self.encoder(x)
        code = torch.tanh(self.code(torch.cat([h[0], h[1]], dim=-1)))
        out, _ = self.decoder(code.unsqueeze(1).expand(-1, x.shape[1], -1))
        return (self.output(out) - x).square().sum(dim=(1, 2))


def invented_series(n: int, seed: int) -> np.ndarray:
    """Seeded sinusoids with per-channel gains plus noise (invented, for timing only)."""
    rng = np.random.default_rng(seed)
    t = np.arange(n, dtype=np.float64)[:, None]
    period = rng.uniform(50, 400, N_CHANNELS)
    gain = rng.uniform(0.5, 2.0, N_CHANNELS)
    return gain * np.sin(2 * np.pi * t / period) + 0.3 * rng.standard_normal((n, N_CHANNELS))


def epoch_seconds(train: np.ndarray, repeats: int) -> dict[str, list[float]]:
    """Seconds of one default training epoch per model, interleaved over ``repeats`` rounds."""
    defaults = registry.create("factorized-vae")
    window, hidden = defaults.window, defaults.hidden_size
    views = sliding_windows(train.astype(np.float32), window)  # a view, not a copy
    order = np.random.default_rng(0).permutation(len(views))[: defaults.max_train_windows]
    times: dict[str, list[float]] = {}
    with torch_session(0, 0):
        models = {
            "reference BiLSTM-AE": BidirectionalLstmAutoencoder(N_CHANNELS, hidden),
            "lstm-vae": registry.create("lstm-vae").build_model(N_CHANNELS),
            "factorized-vae": defaults.build_model(N_CHANNELS),
        }
        optimizers = {k: torch.optim.Adam(m.parameters(), lr=1e-3) for k, m in models.items()}
        generator = torch_generator(0, 0)
        for round_ in range(repeats + 1):  # round 0 warms up and is not counted
            for name, model in models.items():
                start = time.perf_counter()
                run_epoch(model, views, order, optimizers[name], defaults.batch_size, 1.0,
                          defaults.clip_norm, generator)
                if round_:
                    times.setdefault(name, []).append(time.perf_counter() - start)
    return times


def score_throughput(models: dict[str, object], n: int, repeats: int) -> dict[str, float]:
    """Median points per second scoring an ``n`` x 38 series."""
    series = invented_series(n, seed=2)
    out = {}
    for name, det in models.items():
        runs = []
        for _ in range(repeats):
            start = time.perf_counter()
            det.score(series)
            runs.append(n / (time.perf_counter() - start))
        out[name] = statistics.median(runs)
    return out


MEMORY_CHILD = r"""
import sys, time
import numpy as np
import torch
torch.set_num_threads(int(sys.argv[5]))
sys.path.insert(0, sys.argv[4])
from benchkit import registry
det = registry.get(sys.argv[1]).load(sys.argv[2])
n = int(sys.argv[3])
series = np.random.default_rng(3).standard_normal((n, 38))
def status_mb(key):
    with open("/proc/self/status") as fh:
        line = next(x for x in fh if x.startswith(key + ":"))
    return int(line.split()[1]) / 1024
with open("/proc/self/clear_refs", "w") as fh:
    fh.write("5")  # reset the peak (VmHWM) to the current RSS
before = status_mb("VmRSS")
start = time.perf_counter()
scores = det.score(series)
seconds = time.perf_counter() - start
peak = status_mb("VmHWM")
print(before, peak, seconds, int(np.isfinite(scores).sum()))
"""


def scoring_memory(path: Path, name: str, n: int, threads: int) -> tuple[float, float, float]:
    """(RSS before scoring, peak RSS, seconds) in MiB for a fresh process scoring n x 38."""
    done = subprocess.run(
        [sys.executable, "-c", MEMORY_CHILD, name, str(path), str(n), str(ROOT), str(threads)],
        capture_output=True, text=True, check=True,
    )
    before, peak, seconds, finite = done.stdout.split()
    assert int(finite) == n - registry.create(name).warmup, "every step after warm-up scored"
    return float(before), float(peak), float(seconds)


def numerics_child(mode: str) -> None:
    """In a worker started with ``mode``'s environment: one timed epoch and one scoring pass of
    each deep detector; prints ``name epoch_s score_s`` lines."""
    numerics.enter_worker(mode)
    train = invented_series(20_000, seed=1)
    test = invented_series(20_000, seed=2)
    for name in ("factorized-vae", "lstm-vae"):
        det = registry.create(name, max_epochs=1, patience=1, threads=1)
        start = time.perf_counter()
        det.fit(train)
        fit_s = time.perf_counter() - start
        start = time.perf_counter()
        det.score(test)
        print(name, fit_s, time.perf_counter() - start)


def numerics_cost(rounds: int) -> None:
    """Alternate pinned and fast worker processes; print medians and pinned / fast ratios."""
    seconds: dict[tuple[str, str, str], list[float]] = {}
    for _ in range(rounds):
        for mode in ("fast", "pinned"):
            done = subprocess.run(
                [sys.executable, __file__, "--numerics-child", mode],
                env={**os.environ, **numerics.worker_environ(mode)},
                capture_output=True, text=True, check=True,
            )
            for line in done.stdout.split("\n"):
                if line.strip():
                    name, fit_s, score_s = line.split()
                    seconds.setdefault((name, "fit (1 epoch)", mode), []).append(float(fit_s))
                    seconds.setdefault((name, "score 20,000", mode), []).append(float(score_s))
    print(f"\n4. pinned numeric path against each machine's own kernels (\"fast\"); "
          f"fresh worker processes, median of {rounds}, alternated")
    print(f"{'model':<16}{'work':<16}{'fast s':>9}{'pinned s':>10}{'pinned/fast':>13}")
    for name in ("factorized-vae", "lstm-vae"):
        for work in ("fit (1 epoch)", "score 20,000"):
            fast = statistics.median(seconds[(name, work, "fast")])
            pinned = statistics.median(seconds[(name, work, "pinned")])
            print(f"{name:<16}{work:<16}{fast:>9.3f}{pinned:>10.3f}{pinned / fast:>12.2f}x")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="smaller sizes, for a smoke run")
    parser.add_argument("--threads", type=int, default=1,
                        help="torch threads (default 1, as the runner gives each cell)")
    parser.add_argument("--numerics-only", action="store_true",
                        help="only part 4, the cost of the pinned numeric path")
    parser.add_argument("--numerics-child", choices=numerics.MODES, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.numerics_child:
        numerics_child(args.numerics_child)
        return
    if args.numerics_only:
        numerics_cost(3 if args.quick else 5)
        return
    torch.set_num_threads(args.threads)
    repeats = 2 if args.quick else 5
    lengths = (20_000, 100_000) if args.quick else (100_000, 1_000_000)
    train = invented_series(20_000, seed=1)
    print(f"torch {torch.__version__}, {available_cores()} cores, {args.threads} torch thread(s)")
    print(f"train series {train.shape[0]:,} x {N_CHANNELS}; defaults: window 32, hidden 32, "
          "batch 64, epoch = 1024 windows (max_train_windows)")

    times = epoch_seconds(train, repeats)
    reference = statistics.median(times["reference BiLSTM-AE"])
    print(f"\n1. seconds per training epoch (median of {repeats}, interleaved)")
    print(f"{'model':<22}{'s/epoch':>10}{'ratio':>8}{'target':>9}  verdict")
    for name, runs in times.items():
        med = statistics.median(runs)
        target = TARGET_RATIO.get(name)
        ratio = med / reference
        verdict = "" if target is None else ("ok" if ratio <= target else "OVER TARGET")
        target_text = "" if target is None else f"<= {target:g}x"
        print(f"{name:<22}{med:>10.3f}{ratio:>7.2f}x{target_text:>9}  {verdict}")

    with tempfile.TemporaryDirectory() as tmp:
        fitted = {}
        for name in ("factorized-vae", "lstm-vae"):
            det = registry.create(name, max_epochs=1).fit(train)
            det.save(Path(tmp) / f"{name}.pt")
            fitted[name] = det
        n_rate = lengths[0]
        rates = score_throughput(fitted, n_rate, repeats=3)
        print(f"\n2. scoring throughput ({n_rate:,} x {N_CHANNELS}, median of 3)")
        for name, rate in rates.items():
            print(f"{name:<22}{rate:>12,.0f} points/s")

        print("\n3. peak resident memory while scoring (fresh process each; MiB)")
        print(f"{'model':<16}{'steps':>11}{'input':>8}{'before':>9}{'peak':>9}"
              f"{'peak-before':>13}{'seconds':>9}")
        for name in fitted:
            for n in lengths:
                before, peak, seconds = scoring_memory(Path(tmp) / f"{name}.pt", name, n,
                                                       args.threads)
                input_mb = n * N_CHANNELS * 8 / 2**20
                print(f"{name:<16}{n:>11,}{input_mb:>8.0f}{before:>9.0f}{peak:>9.0f}"
                      f"{peak - before:>13.0f}{seconds:>9.1f}")
    own = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"\n(this process peaked at {own:.0f} MiB; 'before' includes the input series)")
    numerics_cost(3 if args.quick else 5)


if __name__ == "__main__":
    main()
