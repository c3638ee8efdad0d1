"""Run in a subprocess by test_numerics.py: fit a small LSTM-VAE and print a hash of its scores.

Usage: ``python numerics_probe.py MODE`` where MODE is ``pinned`` (enter the worker's pinned
numeric path first, as a local-pool worker does) or ``asis`` (whatever the environment gives).
Prints one JSON line: the sha256 of the score bytes and the observed numeric path.
"""

import hashlib
import json
import sys

import numpy as np

from benchkit import numerics

if __name__ == "__main__":
    if sys.argv[1] == "pinned":
        numerics.enter_worker("pinned")
    import torch

    from benchkit.registry import get

    torch.set_num_threads(1)
    t = np.arange(900.0)
    rng = np.random.default_rng(3)
    series = np.column_stack([np.sin(t / 17), np.cos(t / 29), np.sin(t / 7) ** 2, t % 50 / 50])
    series = series + 0.05 * rng.standard_normal(series.shape)
    det = get("lstm-vae")(window=16, hidden_size=16, latent_size=4, max_epochs=2,
                          max_train_windows=128, seed=0, threads=1)
    det.fit(series[:600])
    scores = det.score(series[600:])
    digest = hashlib.sha256(np.ascontiguousarray(scores).tobytes()).hexdigest()
    print(json.dumps({"scores": digest, "path": numerics.observe()}))
