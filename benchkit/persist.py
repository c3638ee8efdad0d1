"""Saving and loading fitted detectors without pickle.

The persistence contract (checked by :mod:`benchkit.testing`, used by ``benchkit export-model``):

* ``detector.save(path)`` writes the fitted state to the file ``path`` (which it creates or
  replaces; nothing half-written is left behind on failure);
* ``Cls.load(path)`` (a classmethod) returns a fitted detector whose ``score`` gives the same
  scores, bit for bit, as the detector that was saved.

Formats, never pickle:

* numpy state: an ``.npz`` archive read with ``allow_pickle=False``; the hyperparameters and
  scalar attributes travel as one JSON text entry (:class:`SavesArrays`);
* torch weights: a state dict read with ``torch.load(..., weights_only=True)``
  (``detectors/_torch.py``);
* models whose fitted state is a tree ensemble or a library object (PyOD's isolation forest,
  LOF, KNN): the scaled training series is saved instead, with its sha256 and the sha256 of the
  fitted model's scores on a probe; ``load`` refits with the recorded hyperparameters and seed
  and refuses, with :class:`~benchkit.errors.DataError`, when the data or the probe scores
  differ (:func:`save_refit_state`, :func:`load_refit_state`).
"""

from __future__ import annotations

import hashlib
import json
import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any, ClassVar

import numpy as np

from benchkit.errors import DataError

ARRAY_FORMAT = "benchkit.numpy-detector/1"
REFIT_FORMAT = "benchkit.refit-detector/1"
PROBE_STEPS = 256
_META = "__meta__"


def has_persistence(cls: type) -> bool:
    """Whether a detector class offers ``save(path)`` and a ``load(path)`` classmethod."""
    return callable(getattr(cls, "save", None)) and callable(getattr(cls, "load", None))


def array_digest(array: np.ndarray) -> str:
    """sha256 hex of a float64 array's shape and bytes (C order)."""
    arr = np.ascontiguousarray(array, dtype=np.float64)
    h = hashlib.sha256(repr(arr.shape).encode())
    h.update(arr.tobytes())
    return h.hexdigest()


def write_atomically(path: str | os.PathLike, write: Callable[[Any], None]) -> None:
    """Call ``write(binary file)`` on a temporary file beside ``path``, then move it into place."""
    target = Path(path)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            write(fh)
        os.replace(tmp, target)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def save_npz(path: str | os.PathLike, meta: dict[str, Any], arrays: dict[str, np.ndarray]) -> None:
    """Write ``arrays`` and the JSON text of ``meta`` to one uncompressed ``.npz`` at ``path``."""
    payload = {k: np.asarray(v) for k, v in arrays.items()}
    payload[_META] = np.array(json.dumps(meta, sort_keys=True, allow_nan=True))
    write_atomically(path, lambda fh: np.savez(fh, **payload))


def load_npz(
    path: str | os.PathLike, fmt: str, detector: str
) -> tuple[dict[str, Any], dict[str, np.ndarray]]:
    """Read a file from :func:`save_npz`; check its format and detector name.

    Raises
    ------
    DataError naming the file when it is missing, not such an archive, of another format or
    holds another detector.
    """
    try:
        with np.load(path, allow_pickle=False) as z:
            arrays = {k: z[k] for k in z.files}
    except FileNotFoundError:
        raise DataError(f"{path}: no such file") from None
    except (OSError, ValueError) as exc:
        raise DataError(f"{path}: not a saved benchkit model ({exc})") from None
    try:
        meta = json.loads(str(arrays.pop(_META)))
    except (KeyError, ValueError):
        raise DataError(f"{path}: not a saved benchkit model (no metadata entry)") from None
    if meta.get("format") != fmt:
        raise DataError(f"{path}: format {meta.get('format')!r}, expected {fmt!r}")
    if meta.get("detector") != detector:
        raise DataError(f"{path}: holds a {meta.get('detector')!r} model, not {detector!r}")
    return meta, arrays


def _new_detector(cls: type, meta: dict[str, Any], path: Any) -> Any:
    params = cls.validate_params(meta.get("params", {}), f"{path}: params")
    return cls(**params)


class SavesArrays:
    """Mixin: ``save``/``load`` for detectors whose fitted state is numpy arrays and scalars.

    A subclass lists the fitted attributes in ``fitted_state``; each holds an array, an int, a
    float, a bool or ``None``.
    """

    fitted_state: ClassVar[tuple[str, ...]] = ()

    def save(self, path: str | os.PathLike) -> None:
        """Write the hyperparameters and fitted attributes to the ``.npz`` file ``path``."""
        scalars: dict[str, Any] = {}
        arrays: dict[str, np.ndarray] = {}
        for name in self.fitted_state:
            if not hasattr(self, name):
                raise RuntimeError(f"{self.name}: call fit() before save()")
            value = getattr(self, name)
            if isinstance(value, np.ndarray):
                arrays[name] = value
            elif value is None or isinstance(value, bool | int | float | np.number):
                scalars[name] = value.item() if isinstance(value, np.number) else value
            else:
                raise TypeError(f"{self.name}.{name}: cannot save a {type(value).__name__}")
        meta = {
            "format": ARRAY_FORMAT,
            "detector": self.name,
            "params": self.get_params(),
            "scalars": scalars,
        }
        save_npz(path, meta, arrays)

    @classmethod
    def load(cls, path: str | os.PathLike) -> Any:
        """A fitted detector read back from :meth:`save`."""
        meta, arrays = load_npz(path, ARRAY_FORMAT, cls.name)
        det = _new_detector(cls, meta, path)
        state = {**meta.get("scalars", {}), **arrays}
        missing = sorted(set(cls.fitted_state) - set(state))
        if missing:
            raise DataError(f"{path}: fitted attribute {missing[0]!r} is missing")
        for name in cls.fitted_state:
            setattr(det, name, state[name])
        return det


def probe_rows(train: np.ndarray, warmup: int) -> np.ndarray:
    """The tail of ``train`` whose scores check a refit: ``PROBE_STEPS`` scored steps."""
    return train[max(0, len(train) - PROBE_STEPS - warmup) :]


def save_refit_state(detector: Any, train: np.ndarray, path: str | os.PathLike) -> None:
    """Save a detector as its (scaled) training series plus the digests a refit must match."""
    probe = detector.score(probe_rows(train, detector.warmup))
    meta = {
        "format": REFIT_FORMAT,
        "detector": detector.name,
        "params": detector.get_params(),
        "train_sha256": array_digest(train),
        "probe_sha256": array_digest(probe),
    }
    save_npz(path, meta, {"train": np.asarray(train, dtype=np.float64)})


def load_refit_state(cls: type, path: str | os.PathLike) -> Any:
    """Refit a detector saved by :func:`save_refit_state`; refuse when anything differs."""
    meta, arrays = load_npz(path, REFIT_FORMAT, cls.name)
    train = arrays.get("train")
    if train is None or train.ndim != 2:
        raise DataError(f"{path}: the saved training series is missing")
    if array_digest(train) != meta.get("train_sha256"):
        raise DataError(f"{path}: the saved training series does not match its recorded sha256")
    det = _new_detector(cls, meta, path).fit(train)
    probe = det.score(probe_rows(train, det.warmup))
    if array_digest(probe) != meta.get("probe_sha256"):
        raise DataError(
            f"{path}: refitting {cls.name} does not reproduce the saved model's scores "
            "(different library versions or numerics?)"
        )
    return det
