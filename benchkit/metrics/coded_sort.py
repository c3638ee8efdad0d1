"""Exact sorts of scores that carry a small code (0..3) per step along.

:func:`sorted_codes` is the entry point. It tries :func:`sorted_with_codes`, two sorts and no
gather, exact unless two distinct scores differ only in their lowest two bits (or a subnormal
sits within three steps of zero); that one then says so and :func:`ascending_order` (one sort of
keys that hold each step's index, a gather, and a repair of the few keys that collide) is used,
which is exact for every input. Used by :func:`benchkit.metrics.alerts.alert_curve`, where the
code is each step's +1/-1. Measured at 1e6 steps: the two sorts cost less than the sort and the
gather, whose random reads of the scores cost about as much as a sort.
"""

from __future__ import annotations

import numpy as np

LOWEST = np.finfo(np.float64).min
_NEAR_ZERO = 4 * np.finfo(np.float64).smallest_subnormal


def ascending_order(
    scores: np.ndarray, codes: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Sort ``scores`` ascending, exactly, carrying a 2-bit code per step along.

    Parameters
    ----------
    scores : 1-D float64, finite or ``-inf``.
    codes : 1-D int8 in 0..3, one per step, moved with its step.

    Returns
    -------
    (order, ascending, carried, ties): the permutation, the sorted scores, ``codes[order]``
    (int64), and the positions ``i`` where ``ascending[i + 1] == ascending[i]`` (``-0.0`` and
    ``0.0`` are one score).

    One sort of float64 keys: each score with its lowest bits replaced by ``4 * step + code``
    (``-inf`` first raised to the lowest finite value, so that no key is NaN). Keys of
    different scores keep their order unless the scores agree above the replaced bits; the few
    places where that leaves neighbours out of order are sorted again by score, in windows
    that widen until nothing is out of order.
    """
    n = len(scores)
    replaced = np.int64((1 << (max(int(n - 1).bit_length(), 1) + 2)) - 1)
    source = np.maximum(scores, LOWEST) if n and scores.min() == -np.inf else scores
    keys = np.bitwise_and(source.view(np.int64), ~replaced)
    order = np.arange(0, 4 * n, 4, dtype=np.int64)  # a scratch buffer until sorted
    order += codes
    keys |= order
    keys.view(np.float64).sort()
    np.bitwise_and(keys, replaced, out=order)
    order >>= 2
    ascending = np.take(scores, order, mode="clip")
    keys &= 3  # the carried codes
    level = np.flatnonzero(ascending[1:] <= ascending[:-1])  # ties, and keys out of order
    late = level[ascending[level + 1] < ascending[level]]
    reach = 8
    while len(late):
        mended = _sort_near(ascending, late, reach, order, keys)
        near = _distinct(np.concatenate((mended - 1, mended)).clip(0, max(n - 2, 0)))
        late = near[ascending[near + 1] < ascending[near]]
        level = _distinct(np.concatenate((level, near)))  # pairs it may have changed: re-read
        reach *= 4
    return order, ascending, keys, level[ascending[level + 1] == ascending[level]]


def sorted_with_codes(
    scores: np.ndarray, codes: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """:func:`sorted_codes` from two sorts: of the scores, and of keys that are the negated
    scores with their lowest two bits replaced by the code (int8 in 0..3).

    Returns what :func:`sorted_codes` returns, or None where that would not be exact: where
    two distinct scores share a key (they differ only in those two bits), and around zero when
    a subnormal within three steps of it is there too (``-0.0`` and ``0.0`` are one score but
    not one bit pattern).

    Both sorts order the keys' upper bits alike, so a run of equal scores holds the codes of
    exactly those steps; no gather from the scores is needed, whose random reads cost about as
    much as a sort at 1e6 steps. ``-inf`` negated is ``+inf``, whose keys (inf or NaN) sort
    last; their codes are not kept (a sort may rewrite NaN keys), and need not be: ``-inf`` is
    never predicted.
    """
    n = len(scores)
    ascending = np.sort(scores)
    keys = np.negative(scores).view(np.int64)
    keys &= np.int64(-4)
    keys |= codes
    keys.view(np.float64).sort()
    tied = _equal_neighbours(ascending)
    if tied is None:
        return None
    zero, past = int(np.searchsorted(ascending, 0.0)), int(np.searchsorted(ascending, 0.0, "right"))
    if past > zero:  # -0.0 and 0.0: one score, two bit patterns
        below = zero > 0 and ascending[zero - 1] > -_NEAR_ZERO
        above = past < n and ascending[past] < _NEAR_ZERO
        if below or above:
            return None
        tied[zero : past - 1] = True
    keys &= 3
    return ascending, keys, tied


def _equal_neighbours(ascending: np.ndarray, block: int = 1 << 16) -> np.ndarray | None:
    """``tied[i]`` when ``ascending[i + 1]`` has the same bits as ``ascending[i]``; None when
    some neighbours differ only in their lowest two bits. Read in blocks, which keeps the
    temporaries in the cache."""
    bits = ascending.view(np.uint64)
    tied = np.empty(max(len(bits) - 1, 0), dtype=bool)
    for lo in range(0, len(tied), block):
        hi = min(lo + block, len(tied))
        apart = np.bitwise_xor(bits[lo + 1 : hi + 1], bits[lo:hi])
        close = np.less(apart, 4, out=tied[lo:hi])
        if close.any() and apart[close].any():
            return None
    return tied


def _distinct(positions: np.ndarray) -> np.ndarray:
    """Sorted distinct values of an int64 array (a sort and a compare: numpy's own ``unique``
    takes far longer on a million integers)."""
    ordered = np.sort(positions)
    keep = np.ones(len(ordered), dtype=bool)
    np.not_equal(ordered[1:], ordered[:-1], out=keep[1:])
    return ordered[keep]


def _sort_near(
    values: np.ndarray, late: np.ndarray, reach: int, *alongside: np.ndarray
) -> np.ndarray:
    """Sort ``values`` by value within ``reach`` steps of each pair ``(i, i + 1)`` in ``late``,
    overlapping windows merged, moving the ``alongside`` arrays with them; in place. Returns
    the positions it sorted."""
    lo = np.maximum(late - reach, 0)
    hi = np.minimum(late + reach + 2, len(values))
    opens = np.concatenate(([True], lo[1:] > hi[:-1]))
    closes = np.concatenate((opens[1:], [True]))
    lo, hi = lo[opens], hi[closes]
    sizes = hi - lo
    where = np.repeat(lo - np.concatenate(([0], np.cumsum(sizes)[:-1])), sizes)
    where += np.arange(len(where))
    fix = np.lexsort((values[where], np.repeat(np.arange(len(lo)), sizes)))
    for array in (values, *alongside):
        array[where] = array[where][fix]
    return where


def sorted_codes(
    scores: np.ndarray, codes: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The sorted scores, the codes in descending order of score, and the ties, exactly.

    Parameters
    ----------
    scores : 1-D float64, finite or ``-inf``.
    codes : 1-D int8 in 0..3, one per step.

    Returns
    -------
    (ascending, carried, tied): ``np.sort(scores)``; the codes (int64) from the highest score
    down, whose first ``finite`` entries belong to the finite scores (codes of ``-inf`` steps
    are not kept); ``tied[i]`` when ``ascending[i + 1] == ascending[i]``.
    """
    fast = sorted_with_codes(scores, codes)
    if fast is not None:
        return fast
    _, ascending, carried, ties = ascending_order(scores, codes)
    tied = np.zeros(max(len(scores) - 1, 0), dtype=bool)
    tied[ties] = True
    return ascending, carried[::-1].copy(), tied
