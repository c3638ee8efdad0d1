"""Event metadata of one cell (culprit KPIs, incident kinds, attributions) and its metrics.

The protocol keeps, beside a cell's scores, what diagnosis needs so that ``rescore`` can
recompute it for new thresholds without running the detector again:

``event_culprit_counts``  int32 per labelled event: its number of culprit channels, -1 unknown;
``event_culprits``        int32, the culprit channels of all events, concatenated in order;
``event_kinds``           str per labelled event: its incident kind, ``""`` unknown;
``attributions``          float64 ``(m, d)``: the detector's attributions at ``attribution_steps``;
``attribution_steps``     int32 ``(m,)``: the test steps inside events that have culprits.

Attributions are kept only inside events with culprits, the only steps diagnosis reads.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from benchkit import metrics as _metrics
from benchkit.data.model import Entity


@dataclass(frozen=True)
class EventData:
    """Per labelled event (in order): culprit channels and kind (``None`` = unknown); the
    attributions at ``steps`` (``None`` when the detector gives none)."""

    culprits: tuple[tuple[int, ...] | None, ...]
    kinds: tuple[str | None, ...]
    attributions: np.ndarray | None = None
    steps: np.ndarray | None = None

    @property
    def has_culprits(self) -> bool:
        return any(c for c in self.culprits)

    @property
    def has_kinds(self) -> bool:
        return any(self.kinds)

    @classmethod
    def from_entity(cls, entity: Entity) -> EventData | None:
        """The metadata of ``entity``'s events, or ``None`` when it has neither culprits nor
        kinds."""
        if not (entity.has_culprits or entity.has_kinds):
            return None
        events = entity.events or ()
        return cls(tuple(e.culprits for e in events), tuple(e.kind for e in events))

    def culprit_steps(self, labels: np.ndarray) -> np.ndarray:
        """The test steps inside events with culprits, increasing (int64)."""
        events = _metrics.labels_to_events(labels)
        keep = np.array([bool(c) for c in self.culprits], dtype=bool)
        if not keep.any():
            return np.empty(0, dtype=np.int64)
        mask = _metrics.events_to_labels(events[keep], len(labels)).astype(bool)
        return np.flatnonzero(mask)

    def with_attributions(self, attributions: np.ndarray, steps: np.ndarray) -> EventData:
        return EventData(self.culprits, self.kinds, attributions, steps)

    def arrays(self) -> dict[str, np.ndarray]:
        """The cache arrays (see the module docstring)."""
        counts = np.array([-1 if c is None else len(c) for c in self.culprits], dtype=np.int32)
        flat = [i for c in self.culprits if c for i in c]
        out = {
            "event_culprit_counts": counts,
            "event_culprits": np.array(flat, dtype=np.int32),
            "event_kinds": np.array([k or "" for k in self.kinds], dtype=np.str_),
        }
        if self.attributions is not None and self.steps is not None:
            out["attributions"] = np.asarray(self.attributions, dtype=np.float64)
            out["attribution_steps"] = np.asarray(self.steps, dtype=np.int32)
        return out

    @classmethod
    def from_arrays(cls, cached: Mapping[str, np.ndarray]) -> EventData | None:
        """Read back :meth:`arrays` from a cached score file; ``None`` when it holds none."""
        if "event_culprit_counts" not in cached:
            return None
        counts = np.asarray(cached["event_culprit_counts"], dtype=np.int64)
        flat = np.asarray(cached["event_culprits"], dtype=np.int64)
        ends = np.cumsum(np.maximum(counts, 0))
        culprits = tuple(
            None if n < 0 else tuple(int(i) for i in flat[end - n : end])
            for n, end in zip(counts, ends, strict=True)
        )
        kinds = tuple(str(k) or None for k in cached["event_kinds"])
        attributions = cached.get("attributions")
        steps = cached.get("attribution_steps")
        return cls(culprits, kinds, attributions, steps)


def strategy_thresholds(strategies: Sequence[str], used: Mapping[str, float]) -> dict[str, float]:
    """The threshold each strategy predicted with: the oracle's point-wise best-F1 threshold,
    ``threshold_<strategy>`` for the others (``-`` read as ``_``)."""
    out = {}
    for s in strategies:
        key = "threshold_oracle_f1" if s == "oracle" else f"threshold_{s.replace('-', '_')}"
        if key in used:
            out[s] = float(used[key])
    return out


def diagnosis_values(
    test_scores: np.ndarray,
    labels: np.ndarray,
    thresholds: Mapping[str, float],
    events: EventData,
    ps: Sequence[int],
) -> dict[tuple[str, str], float]:
    """Diagnosis and per-kind metrics of one cell, ``(strategy, metric) -> value``.

    Per strategy: ``hit_rate@P``, ``ndcg@P``, ``chance_hit_rate@P``, ``diagnosed_events`` (when
    the detector attributes and events have culprits) and ``event_recall[<kind>]`` (when events
    have kinds). Under ``none``: ``culprit_events`` and ``events[<kind>]``, the counts.
    """
    out: dict[tuple[str, str], float] = {}
    if events.has_culprits:
        out[("none", "culprit_events")] = float(sum(1 for c in events.culprits if c))
    if events.has_kinds:
        for kind in sorted({k for k in events.kinds if k}):
            out[("none", f"events[{kind}]")] = float(sum(k == kind for k in events.kinds))
    for strategy, theta in thresholds.items():
        pred = test_scores >= theta
        if events.has_culprits and events.attributions is not None:
            values = _metrics.diagnosis_metrics(
                pred, labels, events.culprits, events.attributions, events.steps, ps
            )
            out.update({(strategy, m): v for m, v in values.items()})
        if events.has_kinds:
            recall = _metrics.kind_recall(pred, labels, events.kinds)
            out.update({(strategy, f"event_recall[{k}]"): v for k, v in recall.items()})
    return out
