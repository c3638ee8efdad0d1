"""How far point adjustment alone lifts F1: the best PA-F1 of uniformly random scores.

With i.i.d. uniform scores, an event of L points becomes detected at the maximum of L uniforms,
which has the law of U**(1/L); given the events' activation values, the unlabelled points fall
into the gaps between them as a multinomial sample. Drawing both gives the exact law of the best
point-adjusted F1 (Kim et al., AAAI 2022 show it is often high); the expectation is estimated by
the mean over ``draws`` draws from ``numpy.random.default_rng(seed)``. Cost O(draws · m log m)
for m events, independent of the series length.
"""

from __future__ import annotations

import numpy as np

from benchkit.metrics.events import lengths, runs_of
from benchkit.metrics.inputs import MetricInputError, as_binary

DEFAULT_DRAWS = 200
_CELLS_PER_CHUNK = 1 << 20


def _best_pa_f1_of_draws(
    rng: np.random.Generator, sizes: np.ndarray, negatives: int, draws: int
) -> np.ndarray:
    """Best PA-F1 for each of ``draws`` random score vectors (one row per draw)."""
    activation = rng.random((draws, len(sizes))) ** (1.0 / sizes)
    order = np.argsort(-activation, axis=1)
    descending = np.take_along_axis(activation, order, axis=1)
    tp = np.cumsum(sizes[order], axis=1)
    edges = np.concatenate(
        (np.ones((draws, 1)), descending, np.zeros((draws, 1))), axis=1
    )
    gaps = np.clip(-np.diff(edges, axis=1), 0.0, None)
    gaps /= gaps.sum(axis=1, keepdims=True)
    fp = np.cumsum(rng.multinomial(negatives, gaps)[:, :-1], axis=1)
    positives = int(sizes.sum())
    return np.max(2.0 * tp / (tp + fp + positives), axis=1)


def random_pa_f1(labels: object, draws: int = DEFAULT_DRAWS, seed: int = 0) -> float:
    """Expected best point-adjusted F1 of uniformly random scores on these labels.

    Parameters
    ----------
    labels : 1-D 0/1 labels.
    draws : number of simulated score vectors (the estimate's standard error shrinks as
        1/sqrt(draws)).
    seed : seed of ``numpy.random.default_rng``; equal inputs give bit-identical results.

    Returns
    -------
    The mean best PA-F1; 0.0 when there are no events.
    """
    y = as_binary(labels, "labels")
    if isinstance(draws, bool) or not isinstance(draws, (int, np.integer)) or draws < 1:
        raise MetricInputError(f"draws: expected an integer >= 1, got {draws!r}")
    sizes = lengths(runs_of(y))
    if len(sizes) == 0:
        return 0.0
    rng = np.random.default_rng(seed)
    negatives = len(y) - int(sizes.sum())
    per_chunk = max(1, _CELLS_PER_CHUNK // len(sizes))
    chunks = [min(per_chunk, draws - start) for start in range(0, int(draws), per_chunk)]
    best = [_best_pa_f1_of_draws(rng, sizes, negatives, size) for size in chunks]
    return float(np.concatenate(best).mean())
