"""The built-in demo dataset: an invented payment-gateway cluster with labelled incidents.

Generated on demand, never stored. See :mod:`benchkit.data.demo_kpis` for the service and its
KPIs. The train part is normal operation; the test part of every node holds the requested
incidents (by default two spikes and one of each other kind), placed without overlap and at
least :data:`MIN_GAP` steps apart.
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping

import numpy as np

from benchkit.data.demo_kpis import (
    KPI_NAMES,
    MAX_CHANNELS,
    MIN_CHANNELS,
    PAIRS,
    STEP_MINUTES,
    STEPS_PER_DAY,
    Drivers,
    add_noise,
    clean_kpis,
    clip_physical,
    make_drivers,
    noise_draws,
)
from benchkit.data.model import Dataset, Entity, Event
from benchkit.errors import DataError

INCIDENT_KINDS = (
    "spike",
    "level-shift",
    "correlation-break",
    "variance-burst",
    "drift",
    "flat-line",
)
DEFAULT_COUNTS = {kind: 2 if kind == "spike" else 1 for kind in INCIDENT_KINDS}
OPTIONS = ("seed", "n_entities", "n_channels", "n_train", "n_test", "incidents")
MIN_GAP = 36
MIN_TRAIN = 2 * STEPS_PER_DAY

# per incident kind: inclusive length range (steps), inclusive range of affected channels
_SHAPES = {
    "spike": ((1, 3), (1, 3)),
    "level-shift": ((24, 72), (1, 3)),
    "correlation-break": ((96, 144), (1, 1)),
    "variance-burst": ((24, 60), (1, 3)),
    "drift": ((72, 144), (1, 2)),
    "flat-line": ((24, 72), (1, 4)),
}
# a correlation break replays the node's own state from 8 to 16 hours earlier
_BREAK_DELAYS = np.arange(96, 193, 4)

SCENARIO = (
    "Larkspur Pay (invented): API nodes of a card-payment gateway, one step = 5 minutes; "
    "KPIs driven by traffic load, node capacity, token-cache health, card-network latency "
    "and a nightly settlement job."
)


def make_demo(
    seed: int = 0,
    n_entities: int = 3,
    n_channels: int = 16,
    n_train: int = 3000,
    n_test: int = 2500,
    incidents: Mapping[str, int] | Iterable[str] | None = None,
) -> Dataset:
    """Generate the demo dataset, bit-for-bit the same for the same arguments.

    Parameters
    ----------
    seed : base seed; node k draws from ``numpy.random.default_rng([seed, k])``.
    n_entities : number of gateway nodes (``pay-gw-01`` ...).
    n_channels : KPIs per node, the first ``n_channels`` of the catalogue (4 to 20).
    n_train, n_test : steps in the normal train part and the labelled test part.
    incidents : incidents per node in the test part, as ``{kind: count}`` (kinds not named get
      none) or a list of kinds (one each); default two ``spike`` and one of every other kind.

    Returns
    -------
    Dataset ``demo`` whose entities carry ``events`` (culprits: the channels each incident
    touched; kind: the incident kind) and ``step_seconds``; with ``notes["incidents"]``
    (entity -> ``[(kind, start, end), ...]``, inclusive test indices, by start),
    ``notes["incident_channels"]`` (the channels each incident touches, same order),
    ``notes["pairs"]`` (designated correlated KPI pairs).
    """
    _check_int("seed", seed, 0, 2**63 - 1)
    _check_int("n_entities", n_entities, 1, 1000)
    _check_int("n_channels", n_channels, MIN_CHANNELS, MAX_CHANNELS)
    _check_int("n_train", n_train, MIN_TRAIN, 10_000_000)
    _check_int("n_test", n_test, 1, 10_000_000)
    counts = incident_counts(incidents)
    channels = KPI_NAMES[:n_channels]
    pairs = [p for p in PAIRS if p[0] in channels and p[1] in channels]
    _check_room(counts, n_test)
    entities, plans, touched = [], {}, {}
    for k in range(n_entities):
        rng = np.random.default_rng([seed, k])
        name = f"pay-gw-{k + 1:02d}"
        entity, plan, cols = _make_node(rng, name, channels, pairs, n_train, n_test, counts)
        entities.append(entity)
        plans[name], touched[name] = plan, cols
    notes = {
        "incidents": plans,
        "incident_channels": touched,
        "pairs": pairs,
        "scenario": SCENARIO,
        "step_minutes": STEP_MINUTES,
        "seed": seed,
    }
    return Dataset(name="demo", entities=entities, source="demo", notes=notes)


def incident_counts(incidents: Mapping[str, int] | Iterable[str] | None) -> dict[str, int]:
    """Normalise the ``incidents`` option to ``{kind: count}`` over all kinds."""
    if incidents is None:
        return dict(DEFAULT_COUNTS)
    if isinstance(incidents, str):
        incidents = [incidents]
    if isinstance(incidents, Mapping):
        given = dict(incidents)
    elif isinstance(incidents, list | tuple):
        given = {}
        for kind in incidents:
            key = kind if isinstance(kind, str) else repr(kind)
            given[key] = given.get(key, 0) + 1
    else:
        raise DataError(
            "demo: option incidents must be a table of counts or a list of kinds, "
            f"got {incidents!r}"
        )
    valid = ", ".join(INCIDENT_KINDS)
    for kind, count in given.items():
        if kind not in INCIDENT_KINDS:
            raise DataError(f"demo: option incidents: unknown kind {kind!r} (valid: {valid})")
        _check_int(f"incidents.{kind}", count, 0, 1000)
    return {kind: int(given.get(kind, 0)) for kind in INCIDENT_KINDS}


def _check_int(name: str, value: object, low: int, high: int) -> None:
    if (
        isinstance(value, bool)
        or not isinstance(value, int | np.integer)
        or not low <= value <= high
    ):
        raise DataError(f"demo: option {name} must be an integer in [{low}, {high}], got {value!r}")


def _check_room(counts: dict[str, int], n_test: int) -> None:
    k = sum(counts.values())
    if k == 0:
        return
    needed = sum(_SHAPES[kind][0][1] * c for kind, c in counts.items()) + MIN_GAP * (k + 1)
    if n_test < needed:
        raise DataError(
            f"demo: option n_test={n_test} is too short for {k} incidents (needs {needed})"
        )


def _plan(rng: np.random.Generator, counts: dict[str, int], n_test: int) -> list[tuple]:
    """Incident kinds and inclusive test intervals in time order, non-overlapping."""
    kinds = [kind for kind in INCIDENT_KINDS for _ in range(counts[kind])]
    if not kinds:
        return []
    kinds = [kinds[i] for i in rng.permutation(len(kinds))]
    lengths = np.array([rng.integers(_SHAPES[k][0][0], _SHAPES[k][0][1] + 1) for k in kinds])
    free = n_test - int(lengths.sum()) - MIN_GAP * (len(kinds) + 1)
    cuts = np.sort(rng.integers(0, free + 1, size=len(kinds)))
    extra = np.diff(np.concatenate(([0], cuts)))
    before = np.concatenate(([0], np.cumsum(lengths)[:-1]))
    starts = MIN_GAP * np.arange(1, len(kinds) + 1) + np.cumsum(extra) + before
    return [(k, int(s), int(s + n - 1)) for k, s, n in zip(kinds, starts, lengths, strict=True)]


def _make_node(
    rng: np.random.Generator,
    name: str,
    channels: tuple[str, ...],
    pairs: list[tuple[str, str]],
    n_train: int,
    n_test: int,
    counts: dict[str, int],
) -> tuple[Entity, list[tuple], list[tuple[str, ...]]]:
    d = len(channels)
    drivers = make_drivers(rng, n_train + n_test)
    draws = noise_draws(rng, n_train + n_test, d)
    series = add_noise(clean_kpis(drivers, d), draws)
    train = series[:n_train]
    scale, low, high = train.std(axis=0), train.min(axis=0), train.max(axis=0)
    plan = _plan(rng, counts, n_test)
    labels = np.zeros(n_test, dtype=np.int8)
    touched, events = [], []
    for kind, start, end in plan:
        cols = _pick_channels(rng, kind, channels, pairs)
        a, b = n_train + start, n_train + end + 1
        if kind == "correlation-break":
            partners = _partners(channels[cols[0]], channels, pairs)
            replay = _least_agreeing_replay(drivers, draws, series, a, b, cols[0], partners)
            series[a:b, cols[0]] = np.clip(replay, low[cols[0]], high[cols[0]])
        else:
            _disturb(rng, kind, series, a, b, cols, scale[cols])
        labels[start : end + 1] = 1
        touched.append(tuple(channels[c] for c in cols))
        events.append(Event(start, end, tuple(int(c) for c in np.sort(cols)), kind))
    series = np.round(clip_physical(series), 4)
    entity = Entity(
        name=name,
        train=series[:n_train],
        test=series[n_train:],
        labels=labels,
        channels=channels,
        events=tuple(events),
        step_seconds=60.0 * STEP_MINUTES,
    )
    return entity, plan, touched


def _partners(name: str, channels: tuple[str, ...], pairs: list[tuple[str, str]]) -> list[int]:
    return [channels.index(b if a == name else a) for a, b in pairs if name in (a, b)]


def _least_agreeing_replay(
    drivers: Drivers,
    draws: np.ndarray,
    series: np.ndarray,
    a: int,
    b: int,
    col: int,
    partners: list[int],
) -> np.ndarray:
    """The KPI computed from the node's earlier state, for the candidate delay whose values
    agree least (lowest correlation) with the KPI's partners over ``[a, b)``."""
    d, n, k = series.shape[1], b - a, _BREAK_DELAYS.size
    steps = (np.arange(a, b)[None, :] - _BREAK_DELAYS[:, None]).ravel()
    clean = clean_kpis(drivers.take(steps), d)
    replays = add_noise(clean, np.tile(draws[:, a:b], (1, k, 1)))[:, col].reshape(k, n)
    worst = np.max([_row_correlation(replays, series[a:b, p]) for p in partners], axis=0)
    return replays[int(np.argmin(worst))]


def _row_correlation(rows: np.ndarray, target: np.ndarray) -> np.ndarray:
    """Pearson correlation of each row of ``rows`` with ``target``."""
    x = rows - rows.mean(axis=1, keepdims=True)
    y = target - target.mean()
    denom = np.sqrt((x * x).sum(axis=1) * (y * y).sum())
    return (x @ y) / np.where(denom > 0, denom, 1.0)


def _pick_channels(
    rng: np.random.Generator, kind: str, channels: tuple[str, ...], pairs: list[tuple[str, str]]
) -> np.ndarray:
    if kind == "correlation-break":
        pair = pairs[int(rng.integers(len(pairs)))]
        return np.array([channels.index(pair[int(rng.integers(2))])])
    lo, hi = _SHAPES[kind][1]
    width = int(rng.integers(lo, hi + 1))
    return np.sort(rng.choice(len(channels), size=width, replace=False))


def _disturb(
    rng: np.random.Generator,
    kind: str,
    series: np.ndarray,
    a: int,
    b: int,
    cols: np.ndarray,
    scale: np.ndarray,
) -> None:
    """Apply one incident in place to ``series[a:b, cols]`` (sizes in train standard deviations)."""
    n = b - a
    if kind == "flat-line":
        series[a:b, cols] = series[a - 1, cols]
        return
    sign = np.where(rng.random(cols.size) < 0.75, 1.0, -1.0)
    if kind == "spike":
        effect = np.broadcast_to(sign * rng.uniform(4.0, 8.0, cols.size) * scale, (n, cols.size))
    elif kind == "level-shift":
        effect = np.broadcast_to(sign * rng.uniform(2.0, 4.0, cols.size) * scale, (n, cols.size))
    elif kind == "variance-burst":
        effect = rng.standard_normal((n, cols.size)) * rng.uniform(1.5, 3.0, cols.size) * scale
    else:  # drift: a ramp from 0 to 3-5 standard deviations
        ramp = np.linspace(0.0, 1.0, n)[:, None]
        effect = ramp * sign * rng.uniform(3.0, 5.0, cols.size) * scale
    series[a:b, cols] += effect


__all__ = ["make_demo", "incident_counts", "INCIDENT_KINDS", "DEFAULT_COUNTS"]
