"""The split-folder layout: ``ROOT/train/<entity>.txt``, ``ROOT/test/<entity>.txt``,
``ROOT/test_label/<entity>.txt``; comma-separated, no header, one row per time step.

An optional ``ROOT/channels.txt`` (one channel name per line) names the channels; without it
they are ``c01``, ``c02``, ... (1-based, as the file's columns).

Optional per-event metadata: ``ROOT/interpretation_label/<entity>.txt`` (culprit KPIs) and
``ROOT/anomaly_type.csv`` (incident kinds); see :mod:`benchkit.data.event_metadata` for their
format, the ``interpretation_end`` option and how lines are matched to events.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np

from benchkit.data.event_metadata import (
    INTERPRETATION_FOLDER,
    KINDS_FILE,
    attach_culprits,
    attach_kinds,
    check_end_convention,
    read_interpretation,
    read_kinds,
)
from benchkit.data.model import Dataset, Entity
from benchkit.data.step import parse_step
from benchkit.data.textio import frame_to_matrix, read_csv_frame
from benchkit.data.validate import (
    Locator,
    check_channel_count,
    check_label_length,
    check_labels,
    check_missing_policy,
    check_same_layout,
    constant_channels,
    default_channel_names,
    finite_or_filled,
    warn_constant,
    warn_filled,
)
from benchkit.errors import DataError

FOLDERS = ("train", "test", "test_label")
CHANNELS_FILE = "channels.txt"
OPTIONS = ("missing", "step", "interpretation_end")


def load_split_folder(
    root: str | Path,
    missing: str = "error",
    step: str | float | None = None,
    interpretation_end: str = "inclusive",
) -> Dataset:
    """Load every entity of a split-folder root.

    Parameters
    ----------
    root : folder holding ``train/``, ``test/`` and ``test_label/``.
    missing : ``"error"`` (NaN/inf is a DataError) or ``"ffill"`` (fill and report the count).
    step : the step length (``"5min"``, ``"1min"``, ``"30s"`` or seconds); sets
      ``Entity.step_seconds`` (``None`` without it: the files hold no timestamps).
    interpretation_end : how ``END`` is written in ``interpretation_label/`` and
      ``anomaly_type.csv``: ``"inclusive"`` (the event's last index) or ``"exclusive"``
      (one past it).

    Returns
    -------
    Dataset named after the folder, one entity per file stem, in natural order
    (``m-1-2`` before ``m-1-10``).
    """
    root = Path(root)
    check_missing_policy(str(root), missing)
    step_seconds = None if step is None else parse_step(str(root), step)
    end_convention = check_end_convention(str(root), interpretation_end)
    names = entity_names(root)
    channels = read_channel_names(root)
    kinds_path = root / KINDS_FILE
    kinds = read_kinds(kinds_path, end_convention) if kinds_path.is_file() else None
    entities: list[Entity] = []
    filled: dict[str, int] = {}
    constant: dict[str, list[str]] = {}
    for name in names:
        entity, n_filled = _load_entity(root, name, channels, missing)
        _add_metadata(root, entity, step_seconds, end_convention, kinds)
        if entities:
            check_same_layout(
                entities[0].channels, entity.channels, str(root / "train" / f"{name}.txt")
            )
        entities.append(entity)
        if n_filled:
            filled[name] = n_filled
        flat = constant_channels(entity.train, entity.channels)
        if flat:
            constant[name] = flat
            warn_constant(str(root / "train" / f"{name}.txt"), flat)
    notes: dict = {}
    if filled:
        notes["filled_cells"] = filled
    if constant:
        notes["constant_channels"] = constant
    return Dataset(name=root.resolve().name, entities=entities, source=str(root), notes=notes)


def entity_names(root: Path) -> list[str]:
    """Entity names found under ``root``; one missing from a folder is an error naming the file."""
    if not root.exists():
        raise DataError(f"{root}: no such folder")
    if not root.is_dir():
        raise DataError(f"{root}: not a folder")
    found: dict[str, set[str]] = {}
    for folder in FOLDERS:
        sub = root / folder
        if not sub.is_dir():
            raise DataError(
                f"{sub}: no such folder (a split-folder root holds train/, test/ and test_label/)"
            )
        found[folder] = {p.stem for p in sub.glob("*.txt") if p.is_file()}
    every = set().union(*found.values())
    if not every:
        raise DataError(f"{root}: no <entity>.txt files in train/, test/ or test_label/")
    for name in sorted(every, key=natural_key):
        for folder in FOLDERS:
            if name not in found[folder]:
                present = [f"{f}/{name}.txt" for f in FOLDERS if name in found[f]]
                raise DataError(
                    f"{root / folder / (name + '.txt')}: missing (entity {name!r} has "
                    f"{' and '.join(present)})"
                )
    return sorted(every, key=natural_key)


def natural_key(name: str) -> list:
    """Sort key that orders embedded numbers by value."""
    return [int(part) if part.isdigit() else part for part in re.split(r"(\d+)", name)]


def read_channel_names(root: Path) -> tuple[str, ...] | None:
    """Names from ``ROOT/channels.txt`` if present (blank lines ignored)."""
    path = root / CHANNELS_FILE
    if not path.is_file():
        return None
    names = tuple(line.strip() for line in path.read_text().splitlines() if line.strip())
    if not names:
        raise DataError(f"{path}: empty file")
    if len(set(names)) != len(names):
        dup = next(n for n in names if names.count(n) > 1)
        raise DataError(f"{path}: channel name {dup!r} appears twice")
    return names


def _read_matrix(path: Path, missing: str) -> tuple[np.ndarray, int]:
    frame = read_csv_frame(path, header=False)
    loc = Locator(str(path))
    return finite_or_filled(frame_to_matrix(frame, loc), loc, missing)


def _load_entity(
    root: Path, name: str, channels: tuple[str, ...] | None, missing: str
) -> tuple[Entity, int]:
    train_path, test_path, label_path = (root / folder / f"{name}.txt" for folder in FOLDERS)
    train, filled_train = _read_matrix(train_path, missing)
    test, filled_test = _read_matrix(test_path, missing)
    check_channel_count(train.shape[1], test.shape[1], str(train_path), str(test_path))
    label_frame = read_csv_frame(label_path, header=False)
    if label_frame.shape[1] != 1:
        raise DataError(f"{label_path}: {label_frame.shape[1]} fields per row, expected 1 label")
    label_loc = Locator(str(label_path))
    labels = check_labels(frame_to_matrix(label_frame, label_loc)[:, 0], label_loc)
    check_label_length(labels, test.shape[0], str(label_path), str(test_path))
    if channels is None:
        channels = default_channel_names(train.shape[1])
    elif len(channels) != train.shape[1]:
        raise DataError(
            f"{root / CHANNELS_FILE}: {len(channels)} names, but {train_path} has "
            f"{train.shape[1]} channels"
        )
    for path, count in ((train_path, filled_train), (test_path, filled_test)):
        warn_filled(str(path), count)
    entity = Entity(name=name, train=train, test=test, labels=labels, channels=channels)
    return entity, filled_train + filled_test


def _add_metadata(
    root: Path,
    entity: Entity,
    step_seconds: float | None,
    end_convention: str,
    kinds: dict | None,
) -> None:
    """Step length, culprit KPIs and kinds from the optional files, matched by overlap."""
    entity.step_seconds = step_seconds
    events = entity.events
    path = root / INTERPRETATION_FOLDER / f"{entity.name}.txt"
    if path.is_file():
        lines = read_interpretation(path, entity.n_channels, entity.test.shape[0], end_convention)
        events = attach_culprits(events, lines, path)
    if kinds is not None:
        lines = kinds.get(entity.name, [])
        events = attach_kinds(events, lines, root / KINDS_FILE, entity.name, entity.test.shape[0])
    entity.events = events
