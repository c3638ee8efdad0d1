"""The step length of a series: from a ``step`` option (``"5min"``) or from timestamps."""

from __future__ import annotations

import re

import numpy as np

from benchkit.errors import DataError

UNITS = {"s": 1.0, "sec": 1.0, "min": 60.0, "h": 3600.0, "d": 86400.0}
_STEP = re.compile(r"^\s*(\d+(?:\.\d*)?|\.\d+)\s*(s|sec|min|h|d)\s*$")


def parse_step(where: str, value: object) -> float:
    """Seconds per step from ``"5min"``, ``"30s"``, ``"1h"``, ``"1d"`` or a number of seconds.

    Raises
    ------
    DataError : naming ``where`` for anything else, or a step that is not positive.
    """
    if isinstance(value, int | float) and not isinstance(value, bool):
        seconds = float(value)
    else:
        match = _STEP.match(value) if isinstance(value, str) else None
        if match is None:
            raise DataError(
                f'{where}: option step must be a length like "5min", "30s", "1h" or a '
                f"number of seconds, got {value!r}"
            )
        seconds = float(match.group(1)) * UNITS[match.group(2)]
    if not np.isfinite(seconds) or seconds <= 0:
        raise DataError(f"{where}: option step must be positive, got {value!r}")
    return seconds


def step_from_timestamps(*parts: np.ndarray | None) -> float | None:
    """Median spacing in seconds of datetime64 timestamps; ``None`` without any (or numeric ones,
    whose unit is unknown)."""
    diffs = []
    for stamps in parts:
        if stamps is None or stamps.size < 2 or not np.issubdtype(stamps.dtype, np.datetime64):
            continue
        diffs.append(np.diff(stamps).astype("timedelta64[ns]").astype(np.float64) / 1e9)
    if not diffs:
        return None
    return float(np.median(np.concatenate(diffs)))


def describe_step(seconds: float | None) -> str:
    """``300.0`` -> ``"5min"``; ``None`` -> ``"-"``."""
    if seconds is None:
        return "-"
    for unit, size in (("d", 86400.0), ("h", 3600.0), ("min", 60.0)):
        if seconds >= size and seconds % size == 0:
            return f"{seconds / size:g}{unit}"
    return f"{seconds:g}s"
