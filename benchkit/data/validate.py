"""Checks shared by every loader; each failure is a :class:`DataError` naming file, row and column.

Rows are numbered as the user sees them: in a text file the line number (a header, when there is
one, is row 1); in a Parquet table the 1-based record number; in an ``.npz`` the 0-based index
``name[row, column]``, as numpy writes it.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from benchkit.errors import DataError

MISSING_POLICIES = ("error", "ffill")


class DataWarning(UserWarning):
    """Suspicious but usable input (a constant channel, filled cells)."""


@dataclass(frozen=True)
class Locator:
    """Turns array indices into the place a user finds in the file.

    Parameters
    ----------
    path : the file, as shown in messages.
    first_row : the row number of data row 0 (2 below a header line, 1 without).
    columns : column names for files that have them (else columns are 1-based positions).
    array : for ``.npz`` members, the member name; rows and columns are then 0-based indices.
    """

    path: str
    first_row: int = 1
    columns: tuple[str, ...] | None = None
    array: str | None = None

    def column(self, j: int) -> str:
        """``path: column 'cpu'`` (or ``column 3`` without names)."""
        if self.array is not None:
            return f"{self.path}: {self.array}[:, {j}]"
        return f"{self.path}: column {self._column_name(j)}"

    def row(self, i: int) -> str:
        """``path: row 17``."""
        if self.array is not None:
            return f"{self.path}: {self.array}[{i}]"
        return f"{self.path}: row {self.first_row + i}"

    def cell(self, i: int, j: int) -> str:
        """``path: row 17, column 'cpu'``."""
        if self.array is not None:
            return f"{self.path}: {self.array}[{i}, {j}]"
        return f"{self.path}: row {self.first_row + i}, column {self._column_name(j)}"

    def _column_name(self, j: int) -> str:
        if self.columns is not None:
            return repr(self.columns[j])
        return str(j + 1)


def default_channel_names(d: int) -> tuple[str, ...]:
    """``c01`` .. ``cNN``, zero-padded to the width of ``d`` (at least two digits)."""
    width = max(2, len(str(d)))
    return tuple(f"c{j + 1:0{width}d}" for j in range(d))


def check_missing_policy(where: str, missing: str) -> None:
    """Reject an unknown ``missing=`` option."""
    if missing not in MISSING_POLICIES:
        valid = ", ".join(repr(m) for m in MISSING_POLICIES)
        raise DataError(f"{where}: option missing must be one of {valid}, got {missing!r}")


def finite_or_filled(values: np.ndarray, loc: Locator, missing: str) -> tuple[np.ndarray, int]:
    """Return ``values`` with non-finite cells handled by the ``missing`` policy.

    ``"error"`` raises on the first NaN or infinity (row-major order); ``"ffill"`` replaces each
    with the previous finite value of its column (the next one for leading cells) and returns the
    number of cells filled. A column with no finite value at all is an error either way.
    """
    bad = ~np.isfinite(values)
    if not bad.any():
        return values, 0
    if missing == "error":
        i, j = np.argwhere(bad)[0]
        raise DataError(f"{loc.cell(i, j)}: {_describe_non_finite(values[i, j])}")
    empty = bad.all(axis=0)
    if empty.any():
        j = int(np.flatnonzero(empty)[0])
        raise DataError(f"{loc.column(j)}: no finite value to fill from")
    return _fill_forward_then_back(values, bad), int(bad.sum())


def _describe_non_finite(value: float) -> str:
    if np.isnan(value):
        return "missing value (NaN or empty cell)"
    return f"not finite ({value})"


def _fill_forward_then_back(values: np.ndarray, bad: np.ndarray) -> np.ndarray:
    n = values.shape[0]
    steps = np.arange(n)[:, None]
    cols = np.arange(values.shape[1])[None, :]
    last_good = np.maximum.accumulate(np.where(bad, -1, steps), axis=0)
    next_good = np.flip(np.minimum.accumulate(np.flip(np.where(bad, n, steps), 0), axis=0), 0)
    source = np.where(last_good >= 0, last_good, next_good)
    return values[source, cols]


def check_labels(labels: np.ndarray, loc: Locator) -> np.ndarray:
    """Labels must be finite and each 0 or 1; returns them as int8."""
    values = np.asarray(labels, dtype=np.float64)
    bad = ~np.isin(values, (0.0, 1.0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        what = (
            "missing label" if np.isnan(values[i]) else f"label must be 0 or 1, got {values[i]:g}"
        )
        raise DataError(f"{loc.row(i)}: {what}")
    return values.astype(np.int8)


def check_label_length(labels: np.ndarray, n_test: int, label_path: str, test_path: str) -> None:
    """The test part needs exactly one label per step."""
    if labels.shape[0] != n_test:
        raise DataError(
            f"{label_path}: {labels.shape[0]} labels, but {test_path} has {n_test} rows"
        )


def check_channel_count(n_train: int, n_test: int, train_path: str, test_path: str) -> None:
    """Train and test must have the same number of channels."""
    if n_train != n_test:
        raise DataError(
            f"{test_path}: {n_test} channels, but {train_path} has {n_train}; "
            "train and test need the same channels"
        )


def check_timestamps(stamps: np.ndarray, loc: Locator) -> None:
    """Timestamps must be strictly increasing (no duplicates, no steps back)."""
    steps = np.diff(stamps)
    zero = np.zeros((), dtype=steps.dtype)
    wrong = steps <= zero
    if not wrong.any():
        return
    i = int(np.argmax(wrong)) + 1
    now, before = _show_stamp(stamps[i]), _show_stamp(stamps[i - 1])
    if steps[i - 1] == zero:
        raise DataError(f"{loc.row(i)}: duplicate timestamp {now} (same as the row before)")
    raise DataError(
        f"{loc.row(i)}: timestamps not sorted ({now} is earlier than the row before, {before})"
    )


def _show_stamp(value: object) -> str:
    if isinstance(value, np.datetime64):
        return np.datetime_as_string(value, unit="s").replace("T", " ")
    return str(value)


def constant_channels(train: np.ndarray, channels: tuple[str, ...]) -> list[str]:
    """Names of channels whose train part never changes (scalers leave them unscaled)."""
    if train.shape[0] == 0:
        return []
    flat = np.all(train == train[0], axis=0)
    return [channels[j] for j in np.flatnonzero(flat)]


def warn_constant(where: str, names: list[str]) -> None:
    """One warning per entity listing its constant channels; the channels are kept."""
    if names:
        shown = ", ".join(repr(n) for n in names)
        warnings.warn(
            f"{where}: constant channel(s) in train: {shown}; kept (scaling leaves them as-is)",
            DataWarning,
            stacklevel=3,
        )


def warn_filled(where: str, count: int) -> None:
    """Report cells filled under ``missing="ffill"``."""
    if count:
        warnings.warn(
            f"{where}: filled {count} missing or non-finite cell(s) with the previous value",
            DataWarning,
            stacklevel=3,
        )


def check_same_layout(first: tuple[str, ...], other: tuple[str, ...], where: str) -> None:
    """All entities of a dataset share one channel layout."""
    if first == other:
        return
    if len(first) != len(other):
        detail = f"{len(other)} channels, the first entity has {len(first)}"
    else:
        j = next(k for k, (a, b) in enumerate(zip(first, other, strict=True)) if a != b)
        detail = f"channel {j + 1} is {other[j]!r}, the first entity's is {first[j]!r}"
    raise DataError(f"{where}: {detail}; a dataset needs one channel layout")


def check_options(where: str, given: dict, allowed: tuple[str, ...], kind: str) -> None:
    """Reject loader options that the format does not know."""
    unknown = sorted(set(given) - set(allowed))
    if unknown:
        valid = ", ".join(allowed) if allowed else "none"
        raise DataError(f"{where}: unknown option {unknown[0]!r} for {kind} (valid: {valid})")
