"""One CSV or Parquet table per entity: a header row, numeric channel columns, a label column,
an optional timestamp column; split into train and test by fraction or by timestamp.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.data.model import Dataset, Entity
from benchkit.data.step import step_from_timestamps
from benchkit.data.textio import column_to_float, frame_to_matrix, read_csv_frame
from benchkit.data.validate import (
    Locator,
    check_labels,
    check_missing_policy,
    check_same_layout,
    check_timestamps,
    constant_channels,
    finite_or_filled,
    warn_constant,
    warn_filled,
)
from benchkit.errors import DataError

TABLE_SUFFIXES = (".csv", ".parquet", ".pq")
OPTIONS = ("label_column", "timestamp_column", "train_fraction", "split_at", "missing")
DEFAULT_TIMESTAMP = "timestamp"


def load_tables(
    paths: list[Path],
    name: str | None = None,
    label_column: str = "label",
    timestamp_column: str | None = None,
    train_fraction: float | None = None,
    split_at: object = None,
    missing: str = "error",
) -> Dataset:
    """Load one entity per table (entity name = file stem).

    Parameters
    ----------
    paths : ``.csv`` / ``.parquet`` files, one per entity, sharing one set of channel columns.
    name : dataset name (default: the single file's stem, or its folder's name).
    label_column : the 0/1 label column (required).
    timestamp_column : the time column; by default ``"timestamp"`` is used when present.
      Timestamps must be strictly increasing.
    train_fraction : leading fraction of rows that form the train part (default 0.5).
    split_at : a timestamp; rows before it are train, the rest test (needs timestamps).
      Give at most one of ``train_fraction`` and ``split_at``.
    missing : ``"error"`` or ``"ffill"`` for NaN/inf channel cells.

    Returns
    -------
    Dataset; each entity also carries ``train_labels`` (the label column's train part).
    """
    where = str(paths[0]) if len(paths) == 1 else str(paths[0].parent)
    check_missing_policy(where, missing)
    if train_fraction is not None and split_at is not None:
        raise DataError(f"{where}: give train_fraction or split_at, not both")
    if train_fraction is not None:
        _check_fraction(where, train_fraction)
    entities: list[Entity] = []
    notes: dict = {}
    for path in paths:
        entity, filled = _load_table(
            path, label_column, timestamp_column, train_fraction, split_at, missing
        )
        if entities:
            check_same_layout(entities[0].channels, entity.channels, str(path))
        entities.append(entity)
        if filled:
            notes.setdefault("filled_cells", {})[entity.name] = filled
        flat = constant_channels(entity.train, entity.channels)
        if flat:
            notes.setdefault("constant_channels", {})[entity.name] = flat
            warn_constant(str(path), flat)
    if name is None:
        name = paths[0].stem if len(paths) == 1 else paths[0].parent.resolve().name
    return Dataset(name=name, entities=entities, source=where, notes=notes)


def tables_in_folder(folder: Path) -> list[Path]:
    """The table files of a folder, sorted by name; none is an error."""
    if not folder.is_dir():
        raise DataError(f"{folder}: no such folder")
    paths = sorted(p for p in folder.iterdir() if p.suffix.lower() in TABLE_SUFFIXES)
    if not paths:
        raise DataError(f"{folder}: no .csv or .parquet tables")
    return paths


def _check_fraction(where: str, fraction: object) -> None:
    ok = isinstance(fraction, int | float) and not isinstance(fraction, bool)
    if not ok or not 0.0 < float(fraction) < 1.0:
        raise DataError(
            f"{where}: option train_fraction must be a number in (0, 1), got {fraction!r}"
        )


def _read_table(path: Path) -> tuple[pd.DataFrame, int]:
    """The raw frame and the row number of its first record."""
    suffix = path.suffix.lower()
    if suffix == ".csv":
        return read_csv_frame(path, header=True), 2
    if not path.is_file():
        raise DataError(f"{path}: no such file")
    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises several types for damaged files
        raise DataError(f"{path}: not a readable Parquet file ({type(exc).__name__})") from None
    if len(frame) == 0:
        raise DataError(f"{path}: empty table")
    return frame.reset_index(drop=True), 1


def _load_table(
    path: Path,
    label_column: str,
    timestamp_column: str | None,
    train_fraction: float | None,
    split_at: object,
    missing: str,
) -> tuple[Entity, int]:
    frame, first_row = _read_table(path)
    columns = tuple(str(c) for c in frame.columns)
    frame.columns = list(columns)
    loc = Locator(str(path), first_row=first_row, columns=columns)
    if label_column not in columns:
        raise DataError(f"{path}: no label column {label_column!r} (columns: {', '.join(columns)})")
    time_name = _timestamp_name(path, columns, timestamp_column)
    label_j = columns.index(label_column)
    labels = check_labels(
        column_to_float(frame[label_column], loc, label_j), _column_loc(loc, label_j)
    )
    stamps = None
    if time_name is not None:
        time_j = columns.index(time_name)
        stamps = _parse_timestamps(frame[time_name], loc, time_j)
        check_timestamps(stamps, loc)
    channel_names = tuple(c for c in columns if c not in (label_column, time_name))
    if not channel_names:
        raise DataError(f"{path}: no channel columns besides {label_column!r}")
    positions = [columns.index(c) for c in channel_names]
    channel_loc = _subset_loc(loc, positions)
    values = frame_to_matrix(frame[list(channel_names)], channel_loc)
    values, filled = finite_or_filled(values, channel_loc, missing)
    warn_filled(str(path), filled)
    n_train = _split_index(path, len(frame), stamps, train_fraction, split_at)
    entity = Entity(
        name=path.stem,
        train=values[:n_train],
        test=values[n_train:],
        labels=labels[n_train:],
        channels=channel_names,
        train_timestamps=None if stamps is None else stamps[:n_train],
        test_timestamps=None if stamps is None else stamps[n_train:],
        train_labels=labels[:n_train],
        step_seconds=step_from_timestamps(stamps),
    )
    return entity, filled


def _subset_loc(loc: Locator, positions: list[int]) -> Locator:
    names = tuple(loc.columns[p] for p in positions) if loc.columns else None
    return Locator(loc.path, first_row=loc.first_row, columns=names)


def _column_loc(loc: Locator, j: int) -> Locator:
    return _subset_loc(loc, [j])


def _timestamp_name(path: Path, columns: tuple[str, ...], requested: str | None) -> str | None:
    if requested is None:
        return DEFAULT_TIMESTAMP if DEFAULT_TIMESTAMP in columns else None
    if requested not in columns:
        raise DataError(
            f"{path}: no timestamp column {requested!r} (columns: {', '.join(columns)})"
        )
    return requested


def _parse_timestamps(column: pd.Series, loc: Locator, j: int) -> np.ndarray:
    """Numbers stay numbers (e.g. epoch seconds); text is parsed as date-times (UTC, naive)."""
    if pd.api.types.is_numeric_dtype(column.dtype) and not pd.api.types.is_bool_dtype(column.dtype):
        values = column.to_numpy()
        if np.issubdtype(values.dtype, np.floating) and not np.isfinite(values).all():
            i = int(np.flatnonzero(~np.isfinite(values))[0])
            raise DataError(f"{loc.cell(i, j)}: missing timestamp")
        return values
    if pd.api.types.is_datetime64_any_dtype(column.dtype):
        parsed = column
    else:
        parsed = pd.to_datetime(column, errors="coerce", utc=True, format="mixed")
    bad = parsed.isna().to_numpy(dtype=bool)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(f"{loc.cell(i, j)}: not a timestamp ({str(column.iloc[i])!r})")
    if getattr(parsed.dt, "tz", None) is not None:
        parsed = parsed.dt.tz_convert("UTC").dt.tz_localize(None)
    return parsed.to_numpy(dtype="datetime64[ns]")


def _split_index(
    path: Path, n: int, stamps: np.ndarray | None, train_fraction: float | None, split_at: object
) -> int:
    if split_at is None:
        n_train = int(np.floor(n * (0.5 if train_fraction is None else float(train_fraction))))
        what = f"train_fraction={train_fraction if train_fraction is not None else 0.5}"
    else:
        if stamps is None:
            raise DataError(f"{path}: option split_at needs a timestamp column")
        n_train = int(np.searchsorted(stamps, _as_stamp(path, split_at, stamps.dtype), side="left"))
        what = f"split_at={split_at}"
    if n_train == 0 or n_train == n:
        part = "train" if n_train == 0 else "test"
        raise DataError(f"{path}: {what} leaves the {part} part empty ({n} rows)")
    return n_train


def _as_stamp(path: Path, value: object, dtype: np.dtype) -> object:
    if np.issubdtype(dtype, np.datetime64):
        try:
            stamp = pd.Timestamp(value.isoformat() if isinstance(value, dt.date) else value)
        except (TypeError, ValueError):
            raise DataError(f"{path}: option split_at is not a timestamp ({value!r})") from None
        if stamp.tzinfo is not None:
            stamp = stamp.tz_convert("UTC").tz_localize(None)
        return np.datetime64(stamp.to_datetime64(), "ns")
    if isinstance(value, int | float) and not isinstance(value, bool):
        return value
    raise DataError(f"{path}: option split_at must be a number like the timestamps, got {value!r}")
