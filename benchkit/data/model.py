"""The data model: a :class:`Dataset` of one or more :class:`Entity` objects.

Array convention (stated once, checked at the edges, trusted inside):
a series is ``(n_steps, n_channels)`` float64, labels are ``(n_steps,)`` int8 of 0/1.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np


@dataclass(eq=False)
class Entity:
    """One monitored unit (a machine, a service node) with a train and a labelled test part."""

    name: str
    train: np.ndarray
    test: np.ndarray
    labels: np.ndarray
    channels: tuple[str, ...]
    train_timestamps: np.ndarray | None = None
    test_timestamps: np.ndarray | None = None
    train_labels: np.ndarray | None = None

    @property
    def n_channels(self) -> int:
        return int(self.train.shape[1])

    def fingerprint(self) -> str:
        """sha256 over the arrays, channel names and labels (hex digest)."""
        h = hashlib.sha256()
        h.update(self.name.encode())
        _feed_array(h, self.train, "train")
        _feed_array(h, self.test, "test")
        _feed_array(h, self.labels.astype(np.int8), "labels")
        if self.train_labels is not None:
            _feed_array(h, self.train_labels.astype(np.int8), "train_labels")
        h.update("\x1f".join(self.channels).encode())
        return h.hexdigest()


@dataclass(eq=False)
class Dataset:
    """A named collection of entities sharing one channel layout."""

    name: str
    entities: list[Entity]
    source: str = ""
    notes: dict = field(default_factory=dict)

    def entity(self, name: str) -> Entity:
        for e in self.entities:
            if e.name == name:
                return e
        raise KeyError(name)

    def fingerprint(self) -> str:
        """sha256 over every entity's fingerprint, in order (hex digest)."""
        h = hashlib.sha256()
        for e in self.entities:
            h.update(e.fingerprint().encode())
        return h.hexdigest()


def _feed_array(h, arr: np.ndarray, tag: str) -> None:
    a = np.ascontiguousarray(arr)
    h.update(f"{tag}:{a.dtype.str}:{a.shape}".encode())
    h.update(a.tobytes())
