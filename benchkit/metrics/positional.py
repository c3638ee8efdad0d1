"""Positional bias δ of the range-based model (Tatbul et al., NeurIPS 2018), in closed form.

For a range of length L and a 1-based position i inside it: flat δ = 1, front δ = L − i + 1,
back δ = i, middle δ = i when i ≤ L/2 and L − i + 1 otherwise. The overlap reward ω of a set of
points inside a range is the sum of δ over those points divided by the sum of δ over the range.
"""

from __future__ import annotations

import numpy as np

BIASES = ("flat", "front", "back", "middle")
CARDINALITIES = ("one", "reciprocal")


def prefix_sums(flags: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Running count of flagged points and running sum of their indices, both with a leading 0."""
    count = np.zeros(len(flags) + 1, dtype=np.int64)
    index_sum = np.zeros(len(flags) + 1, dtype=np.int64)
    np.cumsum(flags, out=count[1:])
    np.cumsum(np.where(flags, np.arange(len(flags), dtype=np.int64), 0), out=index_sum[1:])
    return count, index_sum


def _window(count: np.ndarray, index_sum: np.ndarray, lo: np.ndarray, hi: np.ndarray):
    """(points, sum of indices) of flagged points in inclusive ``[lo, hi]`` (empty if hi < lo)."""
    return count[hi + 1] - count[lo], index_sum[hi + 1] - index_sum[lo]


def _rising(count, index_sum, start, lo, hi):
    """Σ (t − start + 1) over flagged t in ``[lo, hi]``."""
    points, total = _window(count, index_sum, lo, hi)
    return total - (start - 1) * points


def _falling(count, index_sum, end, lo, hi):
    """Σ (end − t + 1) over flagged t in ``[lo, hi]``."""
    points, total = _window(count, index_sum, lo, hi)
    return (end + 1) * points - total


def bias_total(sizes: np.ndarray, bias: str) -> np.ndarray:
    """Σ δ(i, L) for i = 1..L, for each range length L (int64)."""
    if bias == "flat":
        return sizes.copy()
    if bias in ("front", "back"):
        return sizes * (sizes + 1) // 2
    half = sizes // 2
    rest = sizes - half
    return half * (half + 1) // 2 + rest * (rest + 1) // 2


def overlap_reward(
    count: np.ndarray, index_sum: np.ndarray, starts: np.ndarray, ends: np.ndarray, bias: str
) -> np.ndarray:
    """ω summed over all flagged points of each inclusive range ``[start, end]``.

    ``count`` and ``index_sum`` come from :func:`prefix_sums` of the flags (the other side's
    points: predictions for a real range, labels for a predicted range).
    """
    sizes = ends - starts + 1
    if bias == "flat":
        weight = _window(count, index_sum, starts, ends)[0]
    elif bias == "back":
        weight = _rising(count, index_sum, starts, starts, ends)
    elif bias == "front":
        weight = _falling(count, index_sum, ends, starts, ends)
    else:
        split = starts + sizes // 2
        weight = _rising(count, index_sum, starts, starts, split - 1)
        weight = weight + _falling(count, index_sum, ends, split, ends)
    return weight / np.maximum(bias_total(sizes, bias), 1)


def point_weights(events: np.ndarray, bias: str) -> np.ndarray:
    """δ(i, L) / Σ δ for every point of every event, in order (the events' points concatenated)."""
    sizes = events[:, 1] - events[:, 0] + 1
    size = np.repeat(sizes, sizes)
    offsets = np.concatenate(([0], np.cumsum(sizes)[:-1]))
    position = np.arange(int(sizes.sum()), dtype=np.int64) - np.repeat(offsets, sizes) + 1
    if bias == "flat":
        delta = np.ones_like(position)
    elif bias == "back":
        delta = position
    elif bias == "front":
        delta = size - position + 1
    else:
        delta = np.where(position <= size // 2, position, size - position + 1)
    return delta / np.repeat(bias_total(sizes, bias), sizes)


def cardinality_factor(overlaps: np.ndarray, cardinality: str) -> np.ndarray:
    """γ: 1 for ``"one"``; 1 / (number of overlapping ranges) for ``"reciprocal"`` when above 1."""
    if cardinality == "one":
        return np.ones(overlaps.shape)
    return 1.0 / np.maximum(overlaps, 1)
