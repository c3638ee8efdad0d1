"""Labels to events: a small local helper so that the data layer imports nothing else of ours."""

from __future__ import annotations

import numpy as np


def labels_to_events(labels: np.ndarray) -> np.ndarray:
    """Maximal runs of 1 in a 0/1 label array.

    Parameters
    ----------
    labels : (n,) array of 0/1 (any integer or boolean dtype).

    Returns
    -------
    (m, 2) int64 array of inclusive ``[start, end]`` index pairs, in order.
    """
    flags = np.asarray(labels).astype(bool).astype(np.int8)
    edges = np.diff(np.concatenate(([0], flags, [0])))
    starts = np.flatnonzero(edges == 1)
    ends = np.flatnonzero(edges == -1) - 1
    return np.column_stack((starts, ends)).astype(np.int64)


def event_lengths(labels: np.ndarray) -> np.ndarray:
    """Lengths (in steps) of the labelled events, in order."""
    events = labels_to_events(labels)
    return events[:, 1] - events[:, 0] + 1
