"""Diagnosis metrics: do a detector's channel attributions point at the labelled culprit KPIs?

HitRate@P% (Su et al., KDD 2019): with g culprit channels, rank the channels by attribution
(descending, ties to the lower channel index), take the top ``k = floor(P/100 · g)`` and return
the share of the culprits found there. NDCG@P% uses the same k, binary relevance and the
discount ``1 / log2(rank + 1)``, divided by the ideal DCG (``min(k, g)`` relevant at the top).

Per event, a value is averaged over the event's *detected* points (where the thresholded scores
predict an anomaly); a cell's value is the mean over its diagnosed events (events with culprits
and at least one detected point). Events nobody detected are not diagnosed: the count of
diagnosed events is reported beside the means.

Chance level: a uniformly random ranking finds ``min(k, d) / d`` of the culprits on average
(the mean of a hypergeometric draw), whatever g is.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

import numpy as np

from benchkit.metrics.events import event_index, event_points, runs_of, segment_sums
from benchkit.metrics.inputs import MetricInputError, binary_pair

DEFAULT_DIAGNOSIS_P: tuple[int, ...] = (100, 150)
"""The P values (percent) the literature reports for HitRate@P% and NDCG@P%."""


def top_k(p: float, g: np.ndarray | int) -> np.ndarray | int:
    """``floor(p · g)`` for a fraction ``p`` (1.5 for 150 %), robust to float rounding."""
    return np.floor(np.multiply(p, g) + 1e-9).astype(np.int64)


def _channels(culprits: Iterable[int], d: int, name: str = "culprits") -> np.ndarray:
    arr = np.unique(np.asarray(list(culprits), dtype=np.int64))
    if arr.size == 0:
        raise MetricInputError(f"{name}: at least one culprit channel is needed")
    if arr[0] < 0 or arr[-1] >= d:
        bad = arr[0] if arr[0] < 0 else arr[-1]
        raise MetricInputError(f"{name}: channel {bad} is outside 0..{d - 1}")
    return arr


def _attribution_rows(values: object, name: str = "attribution") -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise MetricInputError(f"{name}: expected numbers ({exc})") from None
    if arr.ndim == 1:
        arr = arr[None, :]
    if arr.ndim != 2 or arr.shape[1] == 0:
        raise MetricInputError(f"{name}: expected (d,) or (m, d) values, got shape {arr.shape}")
    if np.isnan(arr).any():
        raise MetricInputError(f"{name}: NaN is not allowed")
    return arr


def _check_p(p: float) -> float:
    if isinstance(p, bool) or not np.isfinite(p) or p <= 0:
        raise MetricInputError(f"p: expected a fraction > 0 (1.5 for 150 %), got {p!r}")
    return float(p)


def ranked_relevance(attributions: np.ndarray, relevant: np.ndarray) -> np.ndarray:
    """``relevant`` (m, d) bool reordered by each row's attribution ranking (descending, ties to
    the lower channel index)."""
    order = np.argsort(-attributions, axis=1, kind="stable")
    return np.take_along_axis(relevant, order, axis=1)


def _discounts(d: int) -> np.ndarray:
    return 1.0 / np.log2(np.arange(2, d + 2, dtype=np.float64))


def rows_hit_rate_ndcg(
    ranked: np.ndarray, g: np.ndarray, p: float
) -> tuple[np.ndarray, np.ndarray]:
    """HitRate and NDCG at ``k = floor(p · g)`` of each row of ranked relevance ``(m, d)``."""
    m, d = ranked.shape
    k = np.minimum(top_k(p, g), d)
    rows = np.arange(m)
    found = np.concatenate([np.zeros((m, 1)), np.cumsum(ranked, axis=1)], axis=1)
    disc = _discounts(d)
    dcg = np.concatenate([np.zeros((m, 1)), np.cumsum(ranked * disc, axis=1)], axis=1)
    ideal = np.concatenate([[0.0], np.cumsum(disc)])[np.minimum(k, g)]
    hit = found[rows, k] / g
    ndcg = np.divide(dcg[rows, k], ideal, out=np.zeros(m), where=ideal > 0)
    return hit, ndcg


def _single(attribution: object, culprits: Iterable[int], p: float) -> tuple[float, float]:
    arr = _attribution_rows(attribution)
    if arr.shape[0] != 1:
        raise MetricInputError(f"attribution: expected one (d,) vector, got shape {arr.shape}")
    chosen = _channels(culprits, arr.shape[1])
    relevant = np.zeros(arr.shape, dtype=bool)
    relevant[0, chosen] = True
    hit, ndcg = rows_hit_rate_ndcg(
        ranked_relevance(arr, relevant), np.array([chosen.size]), _check_p(p)
    )
    return float(hit[0]), float(ndcg[0])


def hit_rate(attribution: object, culprits: Iterable[int], p: float) -> float:
    """HitRate@P% of one attribution vector (Su et al., KDD 2019).

    Parameters
    ----------
    attribution : (d,) numbers, higher = more to blame.
    culprits : the labelled culprit channels (0-based; duplicates count once).
    p : the fraction P/100, e.g. 1.5 for HitRate@150%.

    Returns
    -------
    ``|culprits ∩ top-k| / g`` with ``g = |culprits|``, ``k = floor(p · g)``; channels are ranked
    by attribution, descending, ties broken by the lower channel index.
    """
    return _single(attribution, culprits, p)[0]


def ndcg_at(attribution: object, culprits: Iterable[int], p: float) -> float:
    """NDCG@P% of one attribution vector: binary relevance, ``k = floor(p · g)`` as in
    :func:`hit_rate`, DCG ``Σ_{i<=k} rel_i / log2(i + 1)`` over the ideal ``min(k, g)`` hits."""
    return _single(attribution, culprits, p)[1]


def chance_hit_rate(p: float, g: int, d: int) -> float:
    """Expected HitRate@P% of a uniformly random ranking of ``d`` channels: ``min(k, d) / d``."""
    return float(min(int(top_k(_check_p(p), g)), d) / d)


def diagnosis_metrics(
    pred: object,
    labels: object,
    culprits: Sequence[Sequence[int] | None],
    attributions: object | None,
    steps: object | None,
    ps: Sequence[int] = DEFAULT_DIAGNOSIS_P,
) -> dict[str, float]:
    """HitRate@P%, NDCG@P% and their chance level over the detected points of labelled events.

    Parameters
    ----------
    pred, labels : 0/1 prediction and labels (events are the runs of 1 in ``labels``).
    culprits : per event, in order, its culprit channels or ``None`` (not diagnosable).
    attributions : (m, d) attributions at the test steps ``steps`` (m,), which must cover every
        point of every event with culprits; ``None`` when the detector gives none.
    steps : the test step of each attribution row, increasing.
    ps : P values in percent.

    Returns
    -------
    ``hit_rate@P``, ``ndcg@P``, ``chance_hit_rate@P`` (chance on the same events) for each P:
    means over the diagnosed events, NaN when there is none or no attribution; and
    ``diagnosed_events``, the number of events with culprits and a detected point.
    """
    p_arr, y = binary_pair(pred, labels)
    events = runs_of(y)
    if len(culprits) != len(events):
        raise MetricInputError(
            f"culprits: {len(culprits)} entries for {len(events)} labelled events"
        )
    keep = np.array([c is not None and len(c) > 0 for c in culprits], dtype=bool)
    detected = segment_sums(p_arr, events[:, 0], events[:, 1] + 1) > 0
    diagnosed = keep & detected
    out: dict[str, float] = {"diagnosed_events": float(np.count_nonzero(diagnosed))}
    nan = float("nan")
    if attributions is None or not diagnosed.any():
        out.update({f"{name}@{p}": nan for p in ps for name in ("hit_rate", "ndcg",
                                                                 "chance_hit_rate")})
        return out
    rows = _attribution_rows(attributions, "attributions")
    d = rows.shape[1]
    at = np.asarray(steps, dtype=np.int64)
    chosen = events[diagnosed]
    points = event_points(chosen)
    which = event_index(chosen)
    where = np.searchsorted(at, points)
    inside = where < len(at)
    if not inside.all() or not np.array_equal(at[where], points):
        raise MetricInputError("steps: the attribution rows do not cover every diagnosed event")
    hit_points = p_arr[points]
    which, where = which[hit_points], where[hit_points]
    sets = [_channels(culprits[i], d, f"culprits[{i}]") for i in np.flatnonzero(diagnosed)]
    owner = np.repeat(np.arange(len(sets)), [s.size for s in sets])
    flat = np.concatenate(sets)
    member = np.zeros((len(sets), d), dtype=bool)
    member[owner, flat] = True
    relevant = member[which]
    g = member.sum(axis=1)
    ranked = ranked_relevance(rows[where], relevant)
    n_points = np.bincount(which, minlength=len(sets))
    for p in ps:
        hit, ndcg = rows_hit_rate_ndcg(ranked, g[which], p / 100.0)
        out[f"hit_rate@{p}"] = float(np.mean(np.bincount(which, hit, len(sets)) / n_points))
        out[f"ndcg@{p}"] = float(np.mean(np.bincount(which, ndcg, len(sets)) / n_points))
        chance = np.minimum(top_k(p / 100.0, g), d) / d
        out[f"chance_hit_rate@{p}"] = float(np.mean(chance))
    return out


def kind_recall(pred: object, labels: object, kinds: Sequence[str | None]) -> dict[str, float]:
    """Event recall per incident kind: ``{kind: detected events of that kind / its events}``.

    ``kinds`` gives, per labelled event in order, its kind or ``None`` (left out).
    """
    p_arr, y = binary_pair(pred, labels)
    events = runs_of(y)
    if len(kinds) != len(events):
        raise MetricInputError(f"kinds: {len(kinds)} entries for {len(events)} labelled events")
    detected = segment_sums(p_arr, events[:, 0], events[:, 1] + 1) > 0
    out: dict[str, float] = {}
    for kind in sorted({k for k in kinds if k}):
        mine = np.array([k == kind for k in kinds], dtype=bool)
        out[kind] = float(np.count_nonzero(detected & mine) / np.count_nonzero(mine))
    return out
