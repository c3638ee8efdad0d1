"""One entity in a numpy ``.npz`` archive: ``train``, ``test``, ``labels`` (required) and
optionally ``channels`` (names), ``train_labels``, ``train_timestamps``, ``test_timestamps``.
"""

from __future__ import annotations

import zipfile
from pathlib import Path

import numpy as np

from benchkit.data.model import Dataset, Entity
from benchkit.data.step import step_from_timestamps
from benchkit.data.validate import (
    Locator,
    check_channel_count,
    check_label_length,
    check_labels,
    check_missing_policy,
    check_timestamps,
    constant_channels,
    default_channel_names,
    finite_or_filled,
    warn_constant,
    warn_filled,
)
from benchkit.errors import DataError

REQUIRED = ("train", "test", "labels")
OPTIONAL = ("channels", "train_labels", "train_timestamps", "test_timestamps")
OPTIONS = ("missing",)


def load_npz(path: str | Path, missing: str = "error") -> Dataset:
    """Load an ``.npz`` archive as a one-entity dataset named after the file stem.

    ``train`` and ``test`` are ``(n, d)`` numbers (1-D means one channel), ``labels`` one 0/1
    per test row. Object arrays are refused (no pickles are loaded).
    """
    path = Path(path)
    check_missing_policy(str(path), missing)
    arrays = _read_members(path)
    train, filled_train = _series(arrays, "train", path, missing)
    test, filled_test = _series(arrays, "test", path, missing)
    check_channel_count(train.shape[1], test.shape[1], f"{path}: train", f"{path}: test")
    labels = check_labels(_vector(arrays, "labels", path), Locator(str(path), array="labels"))
    check_label_length(labels, test.shape[0], f"{path}: labels", f"{path}: test")
    train_stamps = _stamps(arrays, "train_timestamps", path, train.shape[0])
    test_stamps = _stamps(arrays, "test_timestamps", path, test.shape[0])
    entity = Entity(
        name=path.stem,
        train=train,
        test=test,
        labels=labels,
        channels=_channels(arrays, path, train.shape[1]),
        train_labels=_train_labels(arrays, path, train.shape[0]),
        train_timestamps=train_stamps,
        test_timestamps=test_stamps,
        step_seconds=step_from_timestamps(train_stamps, test_stamps),
    )
    notes: dict = {}
    if filled_train + filled_test:
        notes["filled_cells"] = {entity.name: filled_train + filled_test}
    flat = constant_channels(entity.train, entity.channels)
    if flat:
        notes["constant_channels"] = {entity.name: flat}
        warn_constant(f"{path}: train", flat)
    return Dataset(name=path.stem, entities=[entity], source=str(path), notes=notes)


def _read_members(path: Path) -> dict[str, np.ndarray]:
    if not path.is_file():
        raise DataError(f"{path}: no such file")
    if path.stat().st_size == 0:
        raise DataError(f"{path}: empty file")
    if not zipfile.is_zipfile(path):
        raise DataError(f"{path}: not a readable .npz archive (not a zip file)")
    try:
        with np.load(path, allow_pickle=False) as archive:
            names = set(archive.files)
            missing = [k for k in REQUIRED if k not in names]
            if missing:
                raise DataError(
                    f"{path}: no array {missing[0]!r} (found: {', '.join(sorted(names)) or 'none'};"
                    f" needed: {', '.join(REQUIRED)})"
                )
            return {k: archive[k] for k in (*REQUIRED, *OPTIONAL) if k in names}
    except DataError:
        raise
    except ValueError as exc:
        if "pickle" in str(exc):
            raise DataError(f"{path}: holds object arrays; store plain numbers") from None
        raise DataError(f"{path}: not a readable .npz archive ({exc})") from None
    except (OSError, zipfile.BadZipFile, EOFError) as exc:
        raise DataError(f"{path}: not a readable .npz archive ({type(exc).__name__})") from None


def _numeric(arrays: dict, key: str, path: Path) -> np.ndarray:
    a = arrays[key]
    if not (np.issubdtype(a.dtype, np.number) or a.dtype == bool):
        raise DataError(f"{path}: {key} has dtype {a.dtype}, expected numbers")
    return a


def _series(arrays: dict, key: str, path: Path, missing: str) -> tuple[np.ndarray, int]:
    a = _numeric(arrays, key, path)
    if a.ndim == 1:
        a = a[:, None]
    if a.ndim != 2:
        raise DataError(f"{path}: {key} has shape {a.shape}, expected (n_steps, n_channels)")
    if a.shape[0] == 0 or a.shape[1] == 0:
        raise DataError(f"{path}: {key} is empty (shape {a.shape})")
    values, filled = finite_or_filled(a.astype(np.float64), Locator(str(path), array=key), missing)
    warn_filled(f"{path}: {key}", filled)
    return values, filled


def _vector(arrays: dict, key: str, path: Path) -> np.ndarray:
    a = _numeric(arrays, key, path)
    if a.ndim == 2 and a.shape[1] == 1:
        a = a[:, 0]
    if a.ndim != 1:
        raise DataError(f"{path}: {key} has shape {a.shape}, expected (n_steps,)")
    return a


def _channels(arrays: dict, path: Path, d: int) -> tuple[str, ...]:
    if "channels" not in arrays:
        return default_channel_names(d)
    names = tuple(str(n) for n in np.ravel(arrays["channels"]))
    if len(names) != d:
        raise DataError(f"{path}: channels has {len(names)} names, but train has {d} channels")
    return names


def _train_labels(arrays: dict, path: Path, n_train: int) -> np.ndarray | None:
    if "train_labels" not in arrays:
        return None
    labels = check_labels(
        _vector(arrays, "train_labels", path), Locator(str(path), array="train_labels")
    )
    check_label_length(labels, n_train, f"{path}: train_labels", f"{path}: train")
    return labels


def _stamps(arrays: dict, key: str, path: Path, n: int) -> np.ndarray | None:
    if key not in arrays:
        return None
    stamps = np.ravel(arrays[key])
    if stamps.shape[0] != n:
        raise DataError(f"{path}: {key} has {stamps.shape[0]} values for {n} rows")
    check_timestamps(stamps, Locator(str(path), array=key))
    return stamps
