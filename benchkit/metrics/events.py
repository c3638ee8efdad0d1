"""Labelled events as inclusive ``[start, end]`` index pairs, and sums and maxima over them."""

from __future__ import annotations

import numpy as np

from benchkit.metrics.inputs import MetricInputError, as_binary


def labels_to_events(labels: object) -> np.ndarray:
    """Maximal runs of ones as an ``(m, 2)`` int64 array of inclusive ``[start, end]`` pairs.

    Parameters
    ----------
    labels : 1-D array of 0/1 (or bool).

    Returns
    -------
    Events in increasing order; ``(0, 2)`` when there are none.
    """
    flags = as_binary(labels, "labels")
    return runs_of(flags)


def runs_of(flags: np.ndarray) -> np.ndarray:
    """:func:`labels_to_events` for an already validated bool array."""
    padded = np.empty(len(flags) + 2, dtype=np.int8)
    padded[0] = padded[-1] = 0
    padded[1:-1] = flags
    edges = np.flatnonzero(np.diff(padded))
    return edges.reshape(-1, 2) - np.array([0, 1], dtype=np.int64)


def events_to_labels(events: object, n: int) -> np.ndarray:
    """Labels of length ``n`` (int8) that are 1 inside every inclusive event (overlaps allowed).

    Parameters
    ----------
    events : ``(m, 2)`` integer array of ``[start, end]`` with ``0 <= start <= end < n``.
    n : series length.
    """
    ev = np.asarray(events)
    if ev.size == 0:
        ev = ev.reshape(0, 2)
    if ev.ndim != 2 or ev.shape[1] != 2:
        raise MetricInputError(f"events: expected an (m, 2) array, got shape {ev.shape}")
    if not np.issubdtype(ev.dtype, np.integer):
        raise MetricInputError(f"events: expected integer indices, got dtype {ev.dtype}")
    if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 0:
        raise MetricInputError(f"n: expected an integer >= 0, got {n!r}")
    bad = (ev[:, 0] < 0) | (ev[:, 0] > ev[:, 1]) | (ev[:, 1] >= n)
    if bad.any():
        row = int(np.flatnonzero(bad)[0])
        raise MetricInputError(
            f"events: row {row} is {ev[row].tolist()}, need 0 <= start <= end < {n}"
        )
    return cover(ev.astype(np.int64), int(n)).astype(np.int8)


def cover(events: np.ndarray, n: int) -> np.ndarray:
    """Bool mask of length ``n`` that is True inside any of the (valid) inclusive events."""
    marks = np.bincount(events[:, 0], minlength=n + 1)[: n + 1]
    marks = marks - np.bincount(events[:, 1] + 1, minlength=n + 1)[: n + 1]
    return np.cumsum(marks[:n]) > 0


def lengths(events: np.ndarray) -> np.ndarray:
    """Number of points of each inclusive event."""
    return events[:, 1] - events[:, 0] + 1


def segment_sums(flags: np.ndarray, starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """Count of True values of ``flags`` in each half-open segment ``[start, stop)``."""
    csum = np.zeros(len(flags) + 1, dtype=np.int64)
    np.cumsum(flags, out=csum[1:])
    return csum[stops] - csum[starts]


def segment_max(values: np.ndarray, starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """Maximum of ``values`` over each non-empty, non-overlapping, ordered ``[start, stop)``."""
    return _segment_reduce(np.maximum, values, starts, stops)


def segment_min(values: np.ndarray, starts: np.ndarray, stops: np.ndarray) -> np.ndarray:
    """Minimum of ``values`` over each non-empty, non-overlapping, ordered ``[start, stop)``."""
    return _segment_reduce(np.minimum, values, starts, stops)


def _segment_reduce(ufunc, values, starts, stops) -> np.ndarray:
    """``ufunc.reduceat`` over the segments (with the gaps between them skipped)."""
    if len(starts) == 0:
        return np.empty(0, dtype=values.dtype)
    bounds = np.column_stack([starts, stops]).ravel()
    if bounds[-1] == len(values):
        bounds = bounds[:-1]
    return ufunc.reduceat(values, bounds)[::2]


def event_index(events: np.ndarray) -> np.ndarray:
    """For the points of all events in order, the row of the event each point belongs to."""
    return np.repeat(np.arange(len(events)), lengths(events))


def event_points(events: np.ndarray) -> np.ndarray:
    """Indices of all points inside the (disjoint, ordered) events, in increasing order."""
    sizes = lengths(events)
    first = np.repeat(events[:, 0] - np.concatenate(([0], np.cumsum(sizes)[:-1])), sizes)
    return first + np.arange(int(sizes.sum()))
