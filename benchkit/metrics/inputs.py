"""Checks at the edge of the metrics package: binary arrays, scores, lengths and choices."""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

from benchkit.errors import BenchkitInputError


class MetricInputError(BenchkitInputError, ValueError):
    """Arrays or options handed to a metric are unusable; the message names the argument."""


def as_binary(values: object, name: str) -> np.ndarray:
    """Return ``values`` as a 1-D bool array, or raise if any value is not 0 or 1.

    Parameters
    ----------
    values : array-like of bool, 0/1 integers or 0.0/1.0 floats.
    name : argument name used in the error message (``"labels"``, ``"pred"``).
    """
    arr = np.asarray(values)
    if arr.ndim != 1:
        raise MetricInputError(f"{name}: expected a 1-D array, got shape {arr.shape}")
    if arr.dtype == np.bool_:
        return arr
    if not (np.issubdtype(arr.dtype, np.integer) or np.issubdtype(arr.dtype, np.floating)):
        raise MetricInputError(f"{name}: expected 0/1 values, got dtype {arr.dtype}")
    bad = (arr != 0) & (arr != 1)
    if bad.any():
        index = int(np.flatnonzero(bad)[0])
        raise MetricInputError(
            f"{name}: values must be 0 or 1, found {arr[index].item()!r} at index {index}"
        )
    return arr != 0


def as_scores(values: object, name: str = "scores") -> np.ndarray:
    """Return ``values`` as 1-D float64; ``-inf`` is allowed (never predicted), NaN/+inf are not."""
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise MetricInputError(f"{name}: expected numbers ({exc})") from None
    if arr.ndim != 1:
        raise MetricInputError(f"{name}: expected a 1-D array, got shape {arr.shape}")
    if not np.isfinite(arr).all():
        bad = np.isnan(arr) | np.isposinf(arr)
        if bad.any():
            index = int(np.flatnonzero(bad)[0])
            raise MetricInputError(
                f"{name}: NaN and +inf are not allowed, found {arr[index]} at index {index}"
            )
    return arr


def check_same_length(**arrays: np.ndarray) -> int:
    """Return the common length of the named arrays, or raise naming the two that differ."""
    items = list(arrays.items())
    first_name, first = items[0]
    for other_name, other in items[1:]:
        if len(other) != len(first):
            raise MetricInputError(
                f"{other_name} has {len(other)} values but {first_name} has {len(first)}"
            )
    return len(first)


def binary_pair(pred: object, labels: object) -> tuple[np.ndarray, np.ndarray]:
    """Validate a prediction and its labels: both binary, same length."""
    p = as_binary(pred, "pred")
    y = as_binary(labels, "labels")
    check_same_length(labels=y, pred=p)
    return p, y


def scores_and_labels(scores: object, labels: object) -> tuple[np.ndarray, np.ndarray]:
    """Validate scores and their labels: finite or ``-inf`` scores, binary labels, same length."""
    s = as_scores(scores)
    y = as_binary(labels, "labels")
    check_same_length(labels=y, scores=s)
    return s, y


def check_choice(value: object, name: str, choices: Iterable[object]) -> object:
    """Return ``value`` if it is one of ``choices``, else raise naming the valid ones."""
    options = tuple(choices)
    if value not in options:
        valid = ', '.join(repr(o) if o is None else str(o) for o in options)
        raise MetricInputError(f"{name}: {value!r} is not one of {valid}")
    return value


def check_percent(k: object, name: str = "k") -> float:
    """Return ``k`` as a float in [0, 100], or raise."""
    if isinstance(k, bool) or not isinstance(k, (int, float, np.integer, np.floating)):
        raise MetricInputError(f"{name}: expected a number from 0 to 100, got {k!r}")
    value = float(k)
    if not 0.0 <= value <= 100.0:
        raise MetricInputError(f"{name}: expected a number from 0 to 100, got {k!r}")
    return value


def check_delay(delay: object, name: str = "delay") -> int:
    """Return ``delay`` as an int >= 0, or raise."""
    if isinstance(delay, bool) or not isinstance(delay, (int, np.integer)) or delay < 0:
        raise MetricInputError(f"{name}: expected an integer >= 0, got {delay!r}")
    return int(delay)
