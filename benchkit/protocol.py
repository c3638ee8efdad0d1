"""One cell of an experiment: (dataset entity, detector variant, seed, perturbation).

The steps, in order (:func:`run_cell`):

1. apply the perturbation to the raw train and/or test series (before scaling);
2. fit the scaler on train only and transform both parts; then apply the spec's
   ``constant_channels`` rule to the KPIs constant over train (keep, drop or clip; see
   :data:`benchkit.windows.CONSTANT_CHANNEL_MODES`);
3. fit the detector on the scaled train series (timed: ``fit_seconds``);
4. score the train series, and ``vstack(train[-warmup:], test)`` so that every test step gets a
   real score from ``warmup`` steps of context; the context scores are dropped (timed:
   ``score_seconds`` and ``points_per_second`` for the test part);
5. check the scores (1-D, numeric, right length, finite after warm-up); bad output fails the cell;
6. when the detector declares attributions and the entity's events name culprit KPIs:
   ``attribute`` on the same context + test series (timed apart: ``attribute_seconds``),
   checked like the scores, kept only at steps inside events with culprits;
7. :func:`evaluate`: thresholds (oracle on the test labels; POT, a quantile and an alert budget
   calibrated on the train scores after their warm-up) and the metric set with the alert metrics
   for each, plus threshold-free metrics, plus diagnosis (HitRate@P%, NDCG@P%) and per-kind
   event recall where events carry metadata (see :mod:`benchkit.diagnosis`).

Peak memory (``peak_memory_mb``) is the high-water mark of the worker's resident set size during
the cell minus its size when the cell began, so it covers numpy and torch allocations alike. On
Linux the kernel's high-water mark is reset before each cell (``/proc/self/clear_refs``) and read
from ``/proc/self/status``; elsewhere the process-lifetime maximum from ``getrusage`` is used,
which can under-report a cell that needs less than an earlier one.
"""

from __future__ import annotations

import functools
import hashlib
import json
import time
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from benchkit import metrics as _metrics
from benchkit import registry
from benchkit.data.model import Entity
from benchkit.diagnosis import EventData, diagnosis_values, strategy_thresholds
from benchkit.metrics.alerts import best_recall_within, duration
from benchkit.noise import Perturbation, apply_perturbation
from benchkit.spec import ThresholdSpec, metric_options
from benchkit.thresholds import (
    alert_budget_threshold,
    calibration_scores,
    pot_threshold,
    quantile_threshold,
)
from benchkit.windows import Scaler, handle_constant_channels

PROTOCOL_VERSION = 1
"""Bump when a change to this module changes what a cell computes; it is part of every cell key."""

THRESHOLD_FREE = "none"


def canonical_json(value: Any) -> str:
    """Compact JSON with sorted keys: the text that cell keys and evaluation hashes hash."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), allow_nan=False)


def cell_key(
    detector: str,
    params: dict[str, Any],
    entity_fingerprint: str,
    entity: str,
    seed: int,
    perturbation: str,
    scaling: str,
    constant_channels: str = "keep",
    numerics: str = "pinned",
) -> str:
    """sha256 hex of everything that determines a cell's scores (metric options excluded),
    the workers' numeric path (:mod:`benchkit.numerics`) included."""
    payload = {
        "detector": detector,
        "params": params,
        "entity_fingerprint": entity_fingerprint,
        "entity": entity,
        "seed": seed,
        "perturbation": perturbation,
        "scaling": scaling,
        "constant_channels": constant_channels,
        "numerics": numerics,
        "protocol": PROTOCOL_VERSION,
    }
    return hashlib.sha256(canonical_json(payload).encode()).hexdigest()


@dataclass(frozen=True)
class Evaluation:
    """How scores become metrics: threshold settings and ``MetricOptions`` keyword arguments."""

    thresholds: ThresholdSpec
    metric_options: dict[str, Any] = field(default_factory=dict)

    def fingerprint(self) -> str:
        """Hash of the settings; a cached cell whose hash differs gets its metrics recomputed."""
        payload = {
            "thresholds": self.thresholds.to_dict(),
            "metrics": self.metric_options,
            "protocol": PROTOCOL_VERSION,
        }
        return hashlib.sha256(canonical_json(payload).encode()).hexdigest()

    def options(self) -> Any:
        """The ``MetricOptions`` these settings describe."""
        return metric_options(self.metric_options)


@dataclass
class CellTask:
    """Everything a worker needs to compute one cell (picklable).

    With ``cached_scores`` set, the detector is not run: only :func:`evaluate` is. With
    ``save_to`` (a file path), the fitted detector is saved there with ``save(path)`` after
    scoring (``benchkit export-model`` refits a cell this way).
    """

    key: str
    detector: str
    params: dict[str, Any]
    seed: int
    entity_name: str
    perturbation: Perturbation
    scaling: str
    evaluation: Evaluation
    time_limit: float
    entity: Entity | None = None
    cached_scores: dict[str, Any] | None = None
    save_to: str | None = None
    constant_channels: str = "keep"
    numerics: str = "pinned"


@dataclass
class CellResult:
    """What a worker sends back; ``status`` is ``ok``, ``failed`` or ``timeout``.

    ``measures`` holds the store's measure columns (``fit_seconds``, ``score_seconds``,
    ``points_per_second``, ``peak_memory_mb``, ``n_train``, ``n_test``, ``warmup``).
    """

    key: str
    status: str
    error: str | None = None
    scores: dict[str, np.ndarray] | None = None
    metrics: dict[tuple[str, str], float] = field(default_factory=dict)
    thresholds: dict[str, float] = field(default_factory=dict)
    measures: dict[str, Any] = field(default_factory=dict)
    evaluation: str | None = None
    evaluated_only: bool = False
    training: dict[str, Any] | None = None


class BadScores(Exception):
    """A detector returned scores that break the contract (shape, dtype, non-finite)."""


def check_attributions(raw: Any, n_steps: int, n_channels: int, warmup: int) -> np.ndarray:
    """Return ``raw`` as float64 ``(n_steps, n_channels)`` or raise BadScores (rows ``>=
    warmup`` must be finite)."""
    arr = np.asarray(raw)
    if arr.dtype.kind not in "fiu":
        raise BadScores(f"attribute: values of dtype {arr.dtype}; expected float64")
    if arr.shape != (n_steps, n_channels):
        raise BadScores(
            f"attribute: values of shape {arr.shape}; expected ({n_steps}, {n_channels})"
        )
    arr = arr.astype(np.float64, copy=False)
    bad = np.argwhere(~np.isfinite(arr[warmup:]))
    if bad.size:
        raise BadScores(
            f"attribute: {len(bad)} non-finite value(s) after the warm-up of {warmup} steps "
            f"(first at step {bad[0][0] + warmup}, channel {bad[0][1]})"
        )
    return arr


def check_scores(raw: Any, n_steps: int, warmup: int, what: str) -> np.ndarray:
    """Return ``raw`` as float64 ``(n_steps,)`` or raise BadScores with a clear message.

    Steps ``>= warmup`` must be finite; earlier steps may hold anything (they are never used).
    """
    arr = np.asarray(raw)
    if arr.dtype.kind not in "fiu":
        raise BadScores(f"{what}: scores of dtype {arr.dtype}; expected float64")
    if arr.ndim != 1 or arr.shape[0] != n_steps:
        raise BadScores(f"{what}: scores of shape {arr.shape}; expected ({n_steps},)")
    arr = arr.astype(np.float64, copy=False)
    bad = ~np.isfinite(arr[warmup:])
    if bad.any():
        first = int(np.argmax(bad)) + warmup
        raise BadScores(
            f"{what}: {int(bad.sum())} non-finite score(s) after the warm-up of {warmup} steps "
            f"(first at step {first}: {arr[first]})"
        )
    return arr


def evaluate(
    test_scores: np.ndarray,
    train_scores: np.ndarray,
    labels: np.ndarray,
    warmup: int,
    evaluation: Evaluation,
    step_seconds: float | None = None,
    events: EventData | None = None,
) -> tuple[dict[tuple[str, str], float], dict[str, float]]:
    """Metrics of one cell's scores.

    ``events`` (culprits, kinds, attributions) adds the diagnosis and per-kind metrics of
    :func:`benchkit.diagnosis.diagnosis_values` for every strategy.

    Returns
    -------
    metrics : ``(threshold, metric) -> value``, threshold in ``oracle``, ``pot``, ``quantile``,
        ``alert-budget`` and its label-peeking twin ``alert-budget-oracle`` (as configured) and
        ``none`` for ``roc_auc``, ``pr_auc``, ``random_pa_f1``. Every thresholded strategy
        carries the metric set and the alert metrics (``false_alerts_per_day``, ...).
    thresholds : the thresholds used (``threshold_oracle_f1``, ``threshold_pot``,
        ``threshold_quantile``, ``threshold_alert_budget``, ...) and POT fit details (``pot_*``).
    """
    options = evaluation.options()
    cfg = evaluation.thresholds
    labels = np.asarray(labels)
    out: dict[tuple[str, str], float] = {}
    used: dict[str, float] = {}
    calib = calibration_scores(train_scores, warmup)

    def record(strategy: str, theta: float, full: bool = True) -> None:
        pred = test_scores >= theta
        values = _metrics.metric_set(pred, labels, options) if full else {}
        values.update(_metrics.alert_metrics(pred, labels, cfg.merge_gap, step_seconds))
        out.update({(strategy, m): float(v) for m, v in values.items()})

    if "oracle" in cfg.strategies:
        values, oracle_thresholds = _metrics.oracle_metric_set(test_scores, labels, options)
        out.update({("oracle", m): float(v) for m, v in values.items()})
        used.update({f"threshold_oracle_{m}": float(v) for m, v in oracle_thresholds.items()})
        record("oracle", oracle_thresholds["f1"], full=False)
    if "pot" in cfg.strategies:
        pot = pot_threshold(calib, cfg.pot_risk, cfg.pot_initial_quantile)
        used.update(
            threshold_pot=pot.threshold,
            pot_initial_threshold=pot.initial_threshold,
            pot_gamma=pot.gamma,
            pot_sigma=pot.sigma,
            pot_excesses=float(pot.n_excesses),
            pot_fallback=float(pot.method != "gpd"),
        )
        record("pot", pot.threshold)
    if "quantile" in cfg.strategies:
        theta = quantile_threshold(calib, cfg.quantile_level)
        used["threshold_quantile"] = theta
        record("quantile", theta)
    if "alert-budget" in cfg.strategies:
        budget = alert_budget_threshold(
            calib, cfg.alert_budget, cfg.merge_gap, step_seconds, cfg.alert_budget_per
        )
        used["threshold_alert_budget"] = budget.threshold
        used["alert_budget_train_false_alerts"] = float(budget.train_false_alerts)
        record("alert-budget", budget.threshold)
        # Its oracle twin peeks at the test labels: best event recall within the same budget.
        curve = _metrics.alert_curve(test_scores, labels, cfg.merge_gap)
        allowed = cfg.alert_budget * duration(len(labels), step_seconds, cfg.alert_budget_per)
        theta = best_recall_within(curve, allowed)
        used["threshold_alert_budget_oracle"] = theta
        record("alert-budget-oracle", theta)
    out[(THRESHOLD_FREE, "roc_auc")] = float(_metrics.roc_auc(test_scores, labels))
    out[(THRESHOLD_FREE, "pr_auc")] = float(_metrics.pr_auc(test_scores, labels))
    out[(THRESHOLD_FREE, "random_pa_f1")] = float(_metrics.random_pa_f1(labels))
    if events is not None:
        thresholds = strategy_thresholds(cfg.strategies, used)
        out.update(diagnosis_values(test_scores, labels, thresholds, events, options.diagnosis_p))
    return out, used


def _cached_step(cached: dict[str, Any]) -> float | None:
    """The step length saved with cached scores (older caches have none)."""
    step = cached.get("step_seconds")
    if step is None or not np.isfinite(float(step)):
        return None
    return float(step)


def run_cell(task: CellTask) -> CellResult:
    """Compute one cell (steps 1-6 of the module docstring); errors propagate to the caller."""
    if task.cached_scores is not None:
        s = task.cached_scores
        step = task.entity.step_seconds if task.entity is not None else _cached_step(s)
        metrics, used = evaluate(
            s["test_scores"], s["train_scores"], s["labels"], int(s["warmup"]), task.evaluation,
            step,
            EventData.from_arrays(s),
        )
        return CellResult(
            task.key,
            "ok",
            metrics=metrics,
            thresholds=used,
            evaluation=task.evaluation.fingerprint(),
            evaluated_only=True,
        )
    entity = task.entity
    if entity is None:
        raise ValueError("a cell task without cached scores must carry its entity")
    train, test = apply_perturbation(
        entity.train, entity.test, task.perturbation, task.seed, entity.name
    )
    scaler = Scaler(task.scaling).fit(train)
    train, test = scaler.transform(train), scaler.transform(test)
    n_channels = train.shape[1]
    train, test, kept = handle_constant_channels(train, test, task.constant_channels)
    detector = registry.create(task.detector, **task.params)
    t0 = time.perf_counter()
    detector.fit(train)
    fit_seconds = time.perf_counter() - t0
    warmup = int(detector.warmup)
    if not 0 <= warmup < train.shape[0]:
        raise BadScores(f"warm-up of {warmup} steps does not fit in {train.shape[0]} train steps")
    train_scores = check_scores(detector.score(train), train.shape[0], warmup, "train")
    context = train[train.shape[0] - warmup :]
    t0 = time.perf_counter()
    raw = detector.score(np.vstack([context, test]) if warmup else test)
    score_seconds = time.perf_counter() - t0
    test_scores = check_scores(raw, warmup + test.shape[0], warmup, "test")[warmup:]
    labels = np.asarray(entity.labels, dtype=np.int8)
    events = EventData.from_entity(entity)
    attribute_seconds = None
    if events is not None and events.has_culprits and detector.attributes:
        t0 = time.perf_counter()
        raw_attr = detector.attribute(np.vstack([context, test]) if warmup else test)
        attribute_seconds = time.perf_counter() - t0
        n_rows = warmup + test.shape[0]
        values = check_attributions(raw_attr, n_rows, test.shape[1], warmup)[warmup:]
        steps = events.culprit_steps(labels)
        # culprits name the entity's channels: a channel dropped before the detector ranks last
        full = np.full((steps.size, n_channels), -np.inf)
        full[:, kept] = values[steps]
        events = events.with_attributions(full, steps)
    metrics, used = evaluate(
        test_scores, train_scores, labels, warmup, task.evaluation, entity.step_seconds, events
    )
    if task.save_to is not None:
        detector.save(task.save_to)
    training = detector.training_record()
    scores = {
        "test_scores": test_scores,
        "train_scores": train_scores,
        "labels": labels,
        "warmup": np.array(warmup),
        "step_seconds": np.array(np.nan if entity.step_seconds is None else entity.step_seconds),
        **(events.arrays() if events is not None else {}),
    }
    return CellResult(
        task.key,
        "ok",
        scores=scores,
        metrics=metrics,
        thresholds=used,
        measures={
            "fit_seconds": fit_seconds,
            "score_seconds": score_seconds,
            "attribute_seconds": attribute_seconds,
            "points_per_second": test.shape[0] / score_seconds if score_seconds > 0 else None,
            "n_train": int(train.shape[0]),
            "n_test": int(test.shape[0]),
            "warmup": warmup,
        },
        evaluation=task.evaluation.fingerprint(),
        training=training,
    )


# ------------------------------------------------------------------------------- memory


def _status_kb(field_name: str) -> int | None:
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith(field_name + ":"):
                    return int(line.split()[1])
    except OSError:
        return None
    return None


class PeakMemory:
    """Context manager: ``.mb`` = peak resident memory added during the block (see module doc)."""

    def __enter__(self) -> PeakMemory:
        self.mb: float | None = None
        self._reset = False
        _release_freed_heap()
        try:
            with open("/proc/self/clear_refs", "w", encoding="ascii") as fh:
                fh.write("5")  # resets VmHWM to the current RSS (Linux >= 4.0)
            self._reset = True
        except OSError:
            pass
        self._start_kb = _status_kb("VmRSS") if self._reset else _maxrss_kb()
        return self

    def __exit__(self, *exc: object) -> None:
        peak = _status_kb("VmHWM") if self._reset else _maxrss_kb()
        if peak is not None and self._start_kb is not None:
            self.mb = max(peak - self._start_kb, 0) / 1024.0


@functools.cache
def _malloc_trim() -> Any:
    """glibc's ``malloc_trim``, loaded once per process; ``None`` where there is no glibc."""
    try:
        import ctypes

        return ctypes.CDLL("libc.so.6").malloc_trim
    except (OSError, AttributeError):  # not glibc: the memory figure may then read low
        return None


def _release_freed_heap() -> None:
    """Return memory freed by earlier cells to the OS (glibc ``malloc_trim``), so that the next
    cell's resident-memory growth is not hidden by a heap that already holds free pages."""
    trim = _malloc_trim()
    if trim is not None:
        trim(0)


def _maxrss_kb() -> int | None:
    try:
        import resource
    except ImportError:  # pragma: no cover - not on POSIX
        return None
    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)
