"""``export-model``: refit one cell of a finished run and write it as a bundle.

Steps (:func:`export_model`):

1. find the cell: the variant's clean cell on the entity in the latest run of OUT (smallest seed
   unless one is given), and its cached scores;
2. reload the run's dataset and check that the entity's fingerprint is the one the cell used;
3. refit the cell from its spec, parameters and seed in a worker process started exactly as
   the local pool starts them (same thread pinning), and save the fitted detector there;
4. check, before writing anything, that the refit's train and test scores equal the cached ones
   bit for bit, that the saved detector read back here scores the test part (after its context)
   to the cached scores bit for bit, and that the threshold recomputed from the calibration
   scores equals the one the run used;
5. write the bundle (:mod:`benchkit.deploy.bundle`) under a temporary name and rename it.
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np

from benchkit import __version__, registry
from benchkit.data.model import Entity
from benchkit.deploy.bundle import (
    BUNDLE_FORMAT,
    CONTEXT_FILE,
    Bundle,
    model_file_name,
    seal,
    torch_version,
)
from benchkit.deploy.scoring import STREAM_TOLERANCE, batch_scores, pin_numerics, stream_agreement
from benchkit.errors import BenchkitInputError, SpecError
from benchkit.noise import CLEAN
from benchkit.persist import has_persistence
from benchkit.protocol import CellTask, Evaluation, canonical_json, cell_key
from benchkit.spec import ExperimentSpec, parse_spec
from benchkit.store import Store
from benchkit.thresholds import (
    alert_budget_threshold,
    calibration_scores,
    pot_threshold,
    quantile_threshold,
)
from benchkit.windows import Scaler, handle_constant_channels

THRESHOLDS = ("pot", "quantile", "alert-budget")


class NotReproduced(BenchkitInputError):
    """The refit does not give the cached scores: the bundle would not be the measured detector."""


def _first_difference(a: np.ndarray, b: np.ndarray) -> str:
    if a.shape != b.shape:
        return f"shapes {a.shape} and {b.shape}"
    i = int(np.argmax(a.view(np.uint64) != b.view(np.uint64)))
    return f"first at step {i}: {a[i]!r} vs {b[i]!r}"


def same_bits(a: np.ndarray, b: np.ndarray) -> bool:
    """Equal shapes and identical float64 bit patterns."""
    a, b = np.ascontiguousarray(a, np.float64), np.ascontiguousarray(b, np.float64)
    return a.shape == b.shape and a.tobytes() == b.tobytes()


def _find_cell(store: Store, variant: str, entity: str, seed: int | None,
               dataset: str | None) -> dict[str, Any]:  # fmt: skip
    cells = store.cells_frame()
    if variant not in set(cells["variant"]):
        known = ", ".join(sorted(set(cells["variant"]))) or "(none)"
        raise SpecError(f"--variant {variant!r}: not in the latest run; variants: {known}")
    mine = cells[(cells["variant"] == variant) & (cells["perturbation"] == CLEAN.key())]
    if entity not in set(mine["entity"]):
        known = ", ".join(sorted(set(mine["entity"])))
        raise SpecError(f"--entity {entity!r}: no clean cell of {variant!r}; entities: {known}")
    mine = mine[mine["entity"] == entity]
    if dataset is not None:
        mine = mine[mine["dataset"] == dataset]
    if len(set(mine["dataset"])) > 1:
        names = ", ".join(sorted(set(mine["dataset"])))
        raise SpecError(f"--entity {entity!r} is in several datasets ({names}); pass --dataset")
    if mine.empty:
        raise SpecError(f"--dataset {dataset!r}: no cell of {variant!r} on {entity!r}")
    if seed is not None:
        mine = mine[mine["seed"] == seed]
        if mine.empty:
            raise SpecError(f"--seed {seed}: no cell of {variant!r} on {entity!r} with that seed")
    row = mine.sort_values("seed").iloc[0]
    if row["status"] != "ok":
        raise BenchkitInputError(
            f"cell {row['cell_key']} ({variant} on {entity}, seed {row['seed']}) ended "
            f"{row['status']}: {row['error']}"
        )
    cell = store.cell(row["cell_key"])
    assert cell is not None
    cell["variant"] = variant
    return cell


def _entity(spec: ExperimentSpec, cell: dict[str, Any], data_root: str | None):
    from benchkit.runner import load_datasets

    for dataset in load_datasets(spec, data_root):
        if dataset.name == cell["dataset"]:
            entity = dataset.entity(cell["entity"])
            if entity.fingerprint() != cell["entity_fingerprint"]:
                raise BenchkitInputError(
                    f"dataset {cell['dataset']!r}, entity {cell['entity']!r}: the data differ "
                    "from those the run measured (fingerprint mismatch); cannot refit"
                )
            return dataset, entity
    raise BenchkitInputError(f"dataset {cell['dataset']!r} is no longer in the run's spec")


def _refit(spec: ExperimentSpec, cell: dict[str, Any], entity: Entity, model_path: Path):
    """Refit the cell in a fresh worker process of the local pool; return its result."""
    from benchkit.local_pool import run_local

    params = json.loads(cell["params"])
    key = cell_key(cell["detector"], params, cell["entity_fingerprint"], entity.name,
                   int(cell["seed"]), CLEAN.key(), cell["scaling"],
                   spec.constant_channels, spec.execution.numerics)  # fmt: skip
    if key != cell["cell_key"]:
        raise BenchkitInputError(f"cell {cell['cell_key']}: its key does not match its record")
    evaluation = Evaluation(spec.thresholds, dict(spec.metrics))
    task = CellTask(key, cell["detector"], params, int(cell["seed"]), entity.name, CLEAN,
                    cell["scaling"], evaluation, spec.execution.cell_time_limit, entity,
                    save_to=str(model_path), constant_channels=spec.constant_channels,
                    numerics=spec.execution.numerics)  # fmt: skip
    result = next(iter(run_local([task], 1)))
    if result.status != "ok":
        raise NotReproduced(f"refit of cell {key} {result.status}: {result.error}")
    return result


def _threshold(strategy: str, spec: ExperimentSpec, cached: dict[str, Any],
               step_seconds: float | None) -> dict[str, Any]:  # fmt: skip
    cfg = spec.thresholds
    if strategy not in cfg.strategies:
        raise SpecError(
            f"--threshold {strategy}: the run did not use it; it used "
            f"{', '.join(s for s in cfg.strategies if s in THRESHOLDS) or '(none of them)'}"
        )
    calib = calibration_scores(cached["train_scores"], int(cached["warmup"]))
    detail: dict[str, Any] = {
        "array": "calibration",
        "file": CONTEXT_FILE,
        "n_scores": int(calib.size),
        "pot_risk": cfg.pot_risk,
        "pot_initial_quantile": cfg.pot_initial_quantile,
    }
    if strategy == "pot":
        pot = pot_threshold(calib, cfg.pot_risk, cfg.pot_initial_quantile)
        value = pot.threshold
        detail.update(initial_threshold=pot.initial_threshold, n_excesses=pot.n_excesses,
                      method=pot.method,
                      gamma=pot.gamma if pot.method == "gpd" else None,
                      sigma=pot.sigma if pot.method == "gpd" else None)  # fmt: skip
    elif strategy == "quantile":
        value = quantile_threshold(calib, cfg.quantile_level)
        detail["quantile_level"] = cfg.quantile_level
    else:
        budget = alert_budget_threshold(calib, cfg.alert_budget, cfg.merge_gap, step_seconds,
                                        cfg.alert_budget_per)  # fmt: skip
        value = budget.threshold
        detail.update(alert_budget=cfg.alert_budget, alert_budget_per=cfg.alert_budget_per,
                      merge_gap=cfg.merge_gap, step_seconds=step_seconds,
                      train_false_alerts=budget.train_false_alerts)  # fmt: skip
    recorded = cached.get(f"threshold_{strategy.replace('-', '_')}")
    if recorded is None or float(recorded) != value:
        raise NotReproduced(
            f"the {strategy} threshold recomputed from the cached train scores ({value!r}) is "
            f"not the one the run recorded ({recorded!r})"
        )
    return {"strategy": strategy, "value": value, "calibration": detail}


def constant_rule(mode: str, scaled_train: np.ndarray) -> dict[str, Any]:
    """The run's ``constant_channels`` rule as data a bundle can apply to new rows: the kept
    channel indices (``drop``) or the scaled train range each KPI is clipped into (``clip``)."""
    rule: dict[str, Any] = {"mode": mode}
    if mode == "drop":
        _, _, kept = handle_constant_channels(scaled_train, scaled_train[:1], mode)
        rule["kept"] = [int(i) for i in kept]
    elif mode == "clip":
        rule["low"] = [float(v) for v in scaled_train.min(axis=0)]
        rule["high"] = [float(v) for v in scaled_train.max(axis=0)]
    return rule


def _numerics(mode: str) -> Any:
    """The numeric environment the run's cells (and so the bundle's scores) were computed in."""
    from benchkit import numerics

    return numerics.describe(mode)


def _manifest(spec, cell, dataset, entity, detector, threshold, run, scaler, cached, agreement):
    from benchkit.runner import environment

    test = np.asarray(cached["test_scores"])
    return {
        "benchkit_bundle": BUNDLE_FORMAT,
        "created_at": datetime.now(UTC).isoformat(timespec="seconds"),
        "detector": {
            "name": cell["detector"],
            "variant": cell["variant"],
            "params": json.loads(cell["params"]),
            "warmup": int(detector.warmup),
            "needs_torch": bool(getattr(detector, "needs_torch", False)),
            "file": model_file_name(bool(getattr(detector, "needs_torch", False))),
        },
        "scaler": {
            "method": cell["scaling"],
            "offset": [float(v) for v in scaler.offset_],
            "scale": [float(v) for v in scaler.scale_],
        },
        "threshold": {
            **threshold,
            "test_alerts": int(np.count_nonzero(test >= threshold["value"])),
            "caution": "calibrated on the train scores of one benchmark cell; a benchmark "
            "result is no guarantee for a production system",
        },
        "stream": {
            "max_relative_difference": float(agreement),
            "window_local": bool(agreement <= STREAM_TOLERANCE),
        },
        "cell": {
            "key": cell["cell_key"],
            "seed": int(cell["seed"]),
            "perturbation": cell["perturbation"],
            "run_id": run["run_id"],
            "run_name": run["name"],
        },
        "dataset": {"name": dataset.name, "fingerprint": dataset.fingerprint()},
        "entity": {
            "name": entity.name,
            "fingerprint": entity.fingerprint(),
            "channels": list(entity.channels),
            "n_train": int(entity.train.shape[0]),
            "n_test": int(entity.test.shape[0]),
        },
        "spec_digest": "sha256:"
        + hashlib.sha256(canonical_json(spec.to_dict()).encode()).hexdigest(),
        "versions": {"benchkit": __version__, "torch": torch_version(),
                     "numpy": np.__version__},  # fmt: skip
        "numerics": _numerics(spec.execution.numerics),
        "environment": environment(),
        "run_environment": run["environment"],
    }


def export_model(
    out: str | Path,
    variant: str,
    entity: str,
    to: str | Path,
    threshold: str = "pot",
    *,
    seed: int | None = None,
    dataset: str | None = None,
    data_root: str | None = None,
) -> Path:
    """Export one clean cell of the latest run in ``out`` as a bundle folder ``to``.

    Raises :class:`~benchkit.errors.BenchkitInputError` (one line) for bad arguments, a detector
    without ``save``/``load``, changed data, or a refit that does not reproduce the cached
    scores; nothing is written then.
    """
    target = Path(to)
    if target.exists():
        raise SpecError(f"--to {target}: already exists; choose a new folder")
    if not target.parent.is_dir():
        raise SpecError(f"--to {target}: the parent folder does not exist")
    with Store(out) as store:
        run = store.latest_run()
        spec = parse_spec(run["spec"], f"{out}: run spec")
        cell = _find_cell(store, variant, entity, seed, dataset)
        cached = store.load_scores(cell["cell_key"])
    cls = registry.get(cell["detector"])
    if not has_persistence(cls):
        raise BenchkitInputError(
            f"--variant {variant}: detector {cell['detector']!r} has no save(path)/load(path), "
            "so export-model cannot bundle it (see DEVELOPERS.md, persistence)"
        )
    data, ent = _entity(spec, cell, data_root)
    chosen = _threshold(threshold, spec, cached, ent.step_seconds)
    pin_numerics()
    staging = Path(tempfile.mkdtemp(prefix=f".{target.name}.partial-", dir=target.parent))
    try:
        model_path = staging / model_file_name(bool(getattr(cls, "needs_torch", False)))
        result = _refit(spec, cell, ent, model_path)
        for part in ("train_scores", "test_scores"):
            if not same_bits(result.scores[part], cached[part]):
                raise NotReproduced(
                    f"refit of cell {cell['cell_key']}: {part} differ from the cached ones "
                    f"({_first_difference(result.scores[part], cached[part])}); nothing written"
                )
        scaler = Scaler(cell["scaling"]).fit(ent.train)
        warmup = int(cached["warmup"])
        context = np.ascontiguousarray(ent.train[ent.train.shape[0] - warmup :], np.float64)
        rule = constant_rule(spec.constant_channels, scaler.transform(ent.train))
        calib = calibration_scores(cached["train_scores"], warmup)
        # the bundle as apply will read it, to check apply's own path on the test part
        probe = Bundle(staging, {"entity": {"channels": list(ent.channels)},
                                 "detector": {"warmup": warmup}, "constant_channels": rule},
                       cls.load(model_path), scaler, context, calib)  # fmt: skip
        detector = probe.detector
        scaled_context = probe.prepare(context, context=True)
        scaled_test = probe.prepare(ent.test)
        applied = batch_scores(detector, scaled_context, scaled_test)
        if not same_bits(applied, cached["test_scores"]):
            raise NotReproduced(
                f"the saved detector read back does not reproduce the cached test scores "
                f"({_first_difference(applied, cached['test_scores'])}); nothing written"
            )
        series = np.vstack([scaled_context, scaled_test])
        full = np.concatenate([np.full(warmup, -np.inf), applied])
        agreement = stream_agreement(detector, series, full, warmup)
        np.savez(staging / CONTEXT_FILE, context=context, calibration=calib)
        manifest = _manifest(spec, cell, data, ent, detector, chosen, run, scaler, cached,
                             agreement)  # fmt: skip
        seal(staging, {**manifest, "constant_channels": rule})
        os.replace(staging, target)
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    return target


