"""Every predicted range that exists at some threshold level, with the levels where it lives.

Points join the prediction at integer *levels* (``level[t]``: the first level at which point t is
predicted; ``top`` = never). Lowering the threshold one level adds points, and ranges grow and
merge. A range ``[a, b]`` is alive exactly at the levels ``max(level[a..b]) <= k <
min(level[a-1], level[b+1])``, and every such range is the maximal stretch around some point t
whose neighbours' levels do not exceed ``level[t]``. Those stretches are found for all points at
once by binary lifting over a sparse table of range maxima (O(n log n), no loop over points).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np


class RangeLives(NamedTuple):
    """Distinct ranges ``[starts, ends]`` (inclusive), each alive for levels [born, dies)."""

    starts: np.ndarray
    ends: np.ndarray
    born: np.ndarray
    dies: np.ndarray


def _max_table(level: np.ndarray, top: int) -> np.ndarray:
    """``table[j, i] = max(level[i : i + 2**j])``, padded with ``top + 1`` past the end."""
    n = len(level)
    depth = max(1, int(n).bit_length())
    table = np.full((depth, n + 1), top + 1, dtype=level.dtype)
    table[0, :n] = level
    for j in range(1, depth):
        half = 1 << (j - 1)
        width = n + 1 - 2 * half
        np.maximum(table[j - 1, :width], table[j - 1, half : half + width], out=table[j, :width])
    return table


def _extend(table: np.ndarray, points: np.ndarray, limit: np.ndarray, leftward: bool):
    """Farthest index reachable from each point while every level passed is <= its limit."""
    n = table.shape[1] - 1
    pos = points.copy()
    for j in range(table.shape[0] - 1, -1, -1):
        step = 1 << j
        if leftward:
            first = pos - step
            ok = first >= 0
            ok &= table[j, np.maximum(first, 0)] <= limit
            pos = np.where(ok, first, pos)
        else:
            ok = table[j, np.minimum(pos + 1, n)] <= limit
            pos = np.where(ok, pos + step, pos)
    return pos


def _range_max(table: np.ndarray, lo: np.ndarray, hi: np.ndarray) -> np.ndarray:
    """max(level[lo..hi]) for non-empty inclusive windows."""
    j = np.frexp(hi - lo + 1)[1] - 1  # floor(log2(width)), exact for integers
    return np.maximum(table[j, lo], table[j, hi - (1 << j) + 1])


def range_lives(level: np.ndarray, top: int) -> RangeLives:
    """All ranges of consecutive predicted points over the levels ``0 .. top - 1``.

    Parameters
    ----------
    level : (n,) integer array, values in ``0..top``; ``top`` means never predicted.
    top : number of levels.
    """
    n = len(level)
    points = np.flatnonzero(level < top)
    if len(points) == 0:
        empty = np.empty(0, dtype=np.int64)
        return RangeLives(empty, empty, empty, empty)
    table = _max_table(level, top)
    own = level[points]
    starts = _extend(table, points, own, leftward=True)
    ends = _extend(table, points, own, leftward=False)
    # One point per range: the first point in it that joins last.
    first = points == starts
    first[~first] = _range_max(table, starts[~first], points[~first] - 1) < own[~first]
    starts, ends, own = starts[first], ends[first], own[first]
    left = np.where(starts > 0, level[np.maximum(starts - 1, 0)], top)
    right = np.where(ends < n - 1, level[np.minimum(ends + 1, n - 1)], top)
    return RangeLives(starts, ends, own.astype(np.int64), np.minimum(left, right).astype(np.int64))
