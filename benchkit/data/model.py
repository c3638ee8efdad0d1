"""The data model: a :class:`Dataset` of one or more :class:`Entity` objects.

Array convention (stated once, checked at the edges, trusted inside):
a series is ``(n_steps, n_channels)`` float64, labels are ``(n_steps,)`` int8 of 0/1.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np

from benchkit.data.events import labels_to_events


@dataclass(frozen=True)
class Event:
    """One labelled test event with the metadata a release may publish for it.

    Attributes
    ----------
    start, end : inclusive 0-based test indices; a maximal run of label 1.
    culprits : 0-based channel indices that showed the incident, sorted, or ``None`` if unknown.
    kind : the incident kind (e.g. ``"metric"``, ``"temporal"``), or ``None`` if unknown.
    """

    start: int
    end: int
    culprits: tuple[int, ...] | None = None
    kind: str | None = None

    @property
    def length(self) -> int:
        return self.end - self.start + 1


def events_from_labels(labels: np.ndarray) -> tuple[Event, ...]:
    """The maximal runs of 1 in ``labels`` as events without metadata."""
    return tuple(Event(int(s), int(e)) for s, e in labels_to_events(labels))


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
    events: tuple[Event, ...] | None = None
    step_seconds: float | None = None

    def __post_init__(self) -> None:
        runs = events_from_labels(self.labels)
        if self.events is None:
            self.events = runs
            return
        self.events = tuple(self.events)
        if [(e.start, e.end) for e in self.events] != [(e.start, e.end) for e in runs]:
            raise ValueError(
                f"entity {self.name!r}: events must equal the maximal runs of label 1"
            )

    @property
    def has_culprits(self) -> bool:
        """True when at least one event carries culprit channels."""
        return any(e.culprits is not None for e in self.events)

    @property
    def has_kinds(self) -> bool:
        """True when at least one event carries an incident kind."""
        return any(e.kind is not None for e in self.events)

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
        # Metadata enters only when present, so data without any keeps its old fingerprint.
        if self.step_seconds is not None:
            h.update(f"step:{float(self.step_seconds)!r}".encode())
        if self.has_culprits or self.has_kinds:
            for e in self.events:
                h.update(f"event:{e.start}:{e.end}:{e.culprits}:{e.kind}".encode())
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
