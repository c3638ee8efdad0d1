"""Reading raw KPI rows for ``benchkit apply``: comma-separated text (with or without a header)
line by line, or a Parquet table.

Text input: when the first non-blank line holds a field that is not a number, it is a header
and columns are matched to the bundle's KPI names (other columns, such as a timestamp or a
label, are ignored); otherwise every line must hold exactly one value per KPI, in the bundle's
order (a split-folder file). Blank lines are skipped. A ragged line or a field that is not a
finite number is a :class:`RowProblem` naming the line (1-based) and column; the caller stops or
skips it, as ``--on-bad-row`` says. No row with a NaN or infinite value is ever scored.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from benchkit.errors import DataError


@dataclass(frozen=True)
class RowProblem:
    """A malformed input line: where, and what is wrong."""

    line: int
    message: str


def _number(text: str) -> float | None:
    try:
        value = float(text)
    except ValueError:
        return None
    return value if math.isfinite(value) else None


class RowReader:
    """Turns text lines into ``(line number, row)`` or :class:`RowProblem` items.

    Parameters
    ----------
    channels : the bundle's KPI names, in order.
    source : how the input is named in messages (a path or ``<stdin>``).
    """

    def __init__(self, channels: tuple[str, ...], source: str) -> None:
        self.channels, self.source = channels, source
        self.columns: list[int] | None = None  # field index of each KPI (None: positional)
        self.width = len(channels)
        self.seen_first = False
        self.rows_seen = 0

    def _header(self, fields: list[str], lineno: int) -> RowProblem | None:
        names = [f.strip() for f in fields]
        missing = [c for c in self.channels if c not in names]
        if missing:
            raise DataError(
                f"{self.source} line {lineno}: header lacks KPI {missing[0]!r} of the bundle "
                f"({len(missing)} of {len(self.channels)} missing)"
            )
        self.columns = [names.index(c) for c in self.channels]
        self.width = len(names)
        return None

    def parse(self, text: str, lineno: int) -> np.ndarray | RowProblem | None:
        """One line: a float64 row, a problem, or ``None`` (blank line or header)."""
        stripped = text.strip()
        if not stripped:
            return None
        fields = stripped.split(",")
        if not self.seen_first:
            self.seen_first = True
            if any(_number(f) is None and f.strip().lower() not in ("nan", "inf", "-inf")
                   for f in fields):  # fmt: skip
                return self._header(fields, lineno)
        first_row, self.rows_seen = self.rows_seen == 0, self.rows_seen + 1
        if len(fields) != self.width and first_row and self.columns is None:
            raise DataError(
                f"{self.source} line {lineno}: {len(fields)} values per row, but the bundle "
                f"expects {len(self.channels)} KPIs"
            )
        if len(fields) != self.width:
            return RowProblem(
                lineno, f"expected {self.width} comma-separated values, got {len(fields)}"
            )
        picked = fields if self.columns is None else [fields[i] for i in self.columns]
        row = np.empty(len(picked))
        for j, field in enumerate(picked):
            value = _number(field)
            if value is None:
                column = j + 1 if self.columns is None else self.columns[j] + 1
                return RowProblem(
                    lineno, f"column {column}: {field.strip()!r} is not a finite number"
                )
            row[j] = value
        return row

    def rows(self, lines: Iterable[str]) -> Iterator[tuple[int, np.ndarray] | RowProblem]:
        """Parse ``lines`` (numbered from 1), skipping blanks and the header."""
        for lineno, text in enumerate(lines, start=1):
            item = self.parse(text, lineno)
            if item is None:
                continue
            yield item if isinstance(item, RowProblem) else (lineno, item)


def read_table(path: Path, channels: tuple[str, ...]) -> np.ndarray:
    """The bundle's KPI columns of a Parquet table, as a float64 ``(n, d)`` array."""
    import pandas as pd

    try:
        frame = pd.read_parquet(path)
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: cannot read as Parquet ({exc})") from None
    missing = [c for c in channels if c not in frame.columns]
    if missing:
        raise DataError(f"{path}: no column for KPI {missing[0]!r} of the bundle")
    values = np.ascontiguousarray(frame[list(channels)].to_numpy(dtype=np.float64))
    bad = np.argwhere(~np.isfinite(values))
    if bad.size:
        r, c = bad[0]
        raise DataError(f"{path}: row {r + 1}, column {channels[c]!r}: not a finite number")
    return values
