"""Write a dataset in the split-folder layout (``benchkit datasets export-demo``).

Values are written with Python's shortest round-trip float text, so loading the folder back
gives bit-identical arrays and the same fingerprint. The folder is assembled under a temporary
name beside the target and renamed into place, so a failure leaves nothing half-written.
"""

from __future__ import annotations

import csv
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.data.event_metadata import INTERPRETATION_FOLDER, KINDS_COLUMNS, KINDS_FILE
from benchkit.data.model import Dataset
from benchkit.data.split_folder import CHANNELS_FILE, FOLDERS
from benchkit.errors import DataError

INCIDENTS_FILE = "incidents.csv"


def export_split_folder(dataset: Dataset, directory: str | Path) -> Path:
    """Write ``dataset`` to ``directory`` (which must not exist, or be an empty folder).

    Writes ``train/``, ``test/``, ``test_label/`` (one ``<entity>.txt`` each),
    ``channels.txt`` and, when the dataset notes list incidents, ``incidents.csv``
    (entity, kind, start, end, channels; inclusive test indices) for people to read.
    Event metadata goes to ``interpretation_label/<entity>.txt`` (culprits) and
    ``anomaly_type.csv`` (kinds), with ``END`` inclusive (the loader's default). The step
    length has no file: load the folder with ``step=`` to restore it.
    """
    target = Path(directory)
    if target.exists() and (not target.is_dir() or any(target.iterdir())):
        raise DataError(f"{target}: already exists and is not an empty folder")
    parent = target.resolve().parent
    if not parent.is_dir():
        raise DataError(f"{parent}: no such folder")
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.", dir=parent))
    try:
        _write_all(dataset, staging)
        if target.exists():
            target.rmdir()
        staging.rename(target)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return target


def _write_all(dataset: Dataset, root: Path) -> None:
    for folder in FOLDERS:
        (root / folder).mkdir()
    for entity in dataset.entities:
        _write_matrix(root / "train" / f"{entity.name}.txt", entity.train)
        _write_matrix(root / "test" / f"{entity.name}.txt", entity.test)
        labels = np.asarray(entity.labels, dtype=np.int64)[:, None]
        _write_matrix(root / "test_label" / f"{entity.name}.txt", labels)
    if dataset.entities:
        channels = dataset.entities[0].channels
        (root / CHANNELS_FILE).write_text("".join(f"{c}\n" for c in channels))
    _write_event_metadata(dataset, root)
    incidents = dataset.notes.get("incidents")
    if incidents:
        _write_incidents(root / INCIDENTS_FILE, incidents, dataset.notes.get("incident_channels"))


def _write_matrix(path: Path, values: np.ndarray) -> None:
    # pandas writes floats as repr() text: the shortest string that reads back to the same double
    pd.DataFrame(values).to_csv(path, header=False, index=False, lineterminator="\n")


def _write_incidents(path: Path, incidents: dict, channels: dict | None) -> None:
    with path.open("w", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(["entity", "kind", "start", "end", "channels"])
        for entity, events in incidents.items():
            names = (channels or {}).get(entity, [()] * len(events))
            for (kind, start, end), touched in zip(events, names, strict=True):
                writer.writerow([entity, kind, start, end, ";".join(touched)])


def _write_event_metadata(dataset: Dataset, root: Path) -> None:
    with_culprits = [e for e in dataset.entities if e.has_culprits]
    if with_culprits:
        (root / INTERPRETATION_FOLDER).mkdir()
    for entity in with_culprits:
        lines = [
            f"{ev.start}-{ev.end}:{','.join(str(c + 1) for c in ev.culprits)}\n"
            for ev in entity.events
            if ev.culprits is not None
        ]
        (root / INTERPRETATION_FOLDER / f"{entity.name}.txt").write_text("".join(lines))
    with_kinds = [e for e in dataset.entities if e.has_kinds]
    if not with_kinds:
        return
    with (root / KINDS_FILE).open("w", newline="") as fh:
        writer = csv.writer(fh, lineterminator="\n")
        writer.writerow(KINDS_COLUMNS)
        for entity in with_kinds:
            for ev in entity.events:
                if ev.kind is not None:
                    writer.writerow([entity.name, f"{ev.start}-{ev.end}", ev.kind])
