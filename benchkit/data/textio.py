"""Comma-separated text read with pandas' C parser; structural faults become DataErrors.

The fast path is one ``pandas.read_csv`` call. Only when something is off (a parser error, or
NaN cells that might come from short rows or blank lines) is the raw file scanned, with numpy,
to name the first faulty row.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.data.validate import Locator
from benchkit.errors import DataError

_NEWLINE, _COMMA = 10, 44
_BLANK_BYTES = (9, 13, 32)  # tab, carriage return, space


def read_csv_frame(path: Path, header: bool) -> pd.DataFrame:
    """Parse ``path`` (comma-separated, one row per line) into a frame of raw columns.

    Raises :class:`DataError` for a missing or empty file, rows with too few or too many fields,
    and blank lines between rows. Trailing blank lines are ignored.
    """
    if not path.exists():
        raise DataError(f"{path}: no such file")
    if not path.is_file():
        raise DataError(f"{path}: not a file")
    try:
        frame = pd.read_csv(path, header=0 if header else None, skip_blank_lines=False, engine="c")
    except pd.errors.EmptyDataError:
        raise DataError(f"{path}: empty file") from None
    except pd.errors.ParserError:
        raise DataError(_describe_bad_shape(path, header) or f"{path}: cannot parse") from None
    except UnicodeDecodeError:
        raise DataError(f"{path}: not a text file (cannot decode as UTF-8)") from None
    if header:
        _check_header(path)
    frame = frame.iloc[: len(frame) - _trailing_blank_lines(path)]
    if len(frame) == 0:
        raise DataError(f"{path}: empty file" + (" (a header but no rows)" if header else ""))
    if frame.isna().to_numpy().any():
        problem = _describe_bad_shape(path, header)
        if problem:
            raise DataError(problem)
    return frame


def frame_to_matrix(frame: pd.DataFrame, loc: Locator) -> np.ndarray:
    """All columns of ``frame`` as one C-ordered ``(n, k)`` float64 array; a non-number names
    its cell.

    Empty cells and NaN/inf texts stay NaN/inf here; the caller's missing-value policy
    decides about them.
    """
    numeric = frame.dtypes.map(pd.api.types.is_numeric_dtype).to_numpy(dtype=bool)
    bools = frame.dtypes.map(pd.api.types.is_bool_dtype).to_numpy(dtype=bool)
    if numeric.all() and not bools.any():
        return np.ascontiguousarray(frame.to_numpy(dtype=np.float64))
    columns = [column_to_float(frame.iloc[:, j], loc, j) for j in range(frame.shape[1])]
    return np.column_stack(columns) if columns else np.empty((len(frame), 0))


def column_to_float(column: pd.Series, loc: Locator, j: int) -> np.ndarray:
    """One column as float64; the first text that is not a number raises a DataError."""
    if pd.api.types.is_bool_dtype(column.dtype):
        raise DataError(f"{loc.column(j)}: true/false values, expected numbers")
    if pd.api.types.is_numeric_dtype(column.dtype):
        return column.to_numpy(dtype=np.float64)
    converted = pd.to_numeric(column, errors="coerce")
    bad = (converted.isna() & column.notna()).to_numpy(dtype=bool)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(f"{loc.cell(i, j)}: not a number ({str(column.iloc[i])!r})")
    return converted.to_numpy(dtype=np.float64)


def field_counts(raw: bytes) -> np.ndarray:
    """Fields per line of comma-separated ``raw`` bytes (0 for a blank line); vectorised."""
    buf = np.frombuffer(raw, dtype=np.uint8)
    is_newline = buf == _NEWLINE
    n_lines = int(is_newline.sum()) + (1 if buf.size and not is_newline[-1] else 0)
    line_of = np.cumsum(is_newline, dtype=np.int64)  # newlines before each non-newline byte
    commas = np.bincount(line_of[buf == _COMMA], minlength=n_lines)[:n_lines]
    content = ~(is_newline | np.isin(buf, _BLANK_BYTES))
    has_content = np.bincount(line_of[content], minlength=n_lines)[:n_lines] > 0
    return np.where(has_content | (commas > 0), commas + 1, 0)


def _describe_bad_shape(path: Path, header: bool) -> str | None:
    counts = field_counts(path.read_bytes())
    last = counts.size
    while last and counts[last - 1] == 0:
        last -= 1
    counts = counts[:last]
    if counts.size == 0:
        return None
    expected = counts[0]
    off = np.flatnonzero(counts != expected)
    if off.size == 0:
        return None
    row = int(off[0]) + 1
    if counts[off[0]] == 0:
        return f"{path}: row {row}: empty line between rows"
    reference = "the header" if header else "row 1"
    return (
        f"{path}: row {row}: {counts[off[0]]} fields, but {reference} has {expected} (ragged rows)"
    )


def _check_header(path: Path) -> None:
    """Column names must be unique (pandas would silently rename a repeat to ``name.1``)."""
    with path.open(encoding="utf-8", errors="replace") as fh:
        names = [n.strip().strip('"') for n in fh.readline().rstrip("\r\n").split(",")]
    seen: set[str] = set()
    for name in names:
        if name in seen:
            raise DataError(f"{path}: row 1: column name {name!r} appears twice")
        seen.add(name)


def _trailing_blank_lines(path: Path) -> int:
    """How many blank lines end the file (they are not rows)."""
    size = path.stat().st_size
    with path.open("rb") as fh:
        fh.seek(max(0, size - 65536))
        tail = fh.read()
    counts = field_counts(tail)
    blank = 0
    # the first line of the tail may be partial, but a partial line is never counted blank
    # unless the whole tail is whitespace, in which case it is blank anyway
    for count in counts[::-1]:
        if count != 0:
            break
        blank += 1
    return blank
