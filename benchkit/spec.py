"""Experiment specs: a TOML file that says what to run, validated completely before anything runs.

Layout (every key is checked; unknown keys are errors)::

    name = "my-experiment"            # required text
    description = ""                  # optional
    seeds = [0, 1]                    # integers >= 0, at least one, no repeats
    scaling = "zscore"                # zscore | minmax | none, always fitted on train only
    constant_channels = "keep"        # KPIs constant over train: keep | drop | clip

    [execution]
    executor = "local"                # local | dask
    workers = 0                       # 0 = one per available CPU core
    scheduler = ""                    # dask scheduler address; "" = a local cluster on loopback
    cell_time_limit = 600.0           # seconds per cell; a slower cell is marked "timeout"
    numerics = "pinned"               # pinned | fast: one numeric path on every x86-64 worker,
                                      #   or each machine's fastest (see benchkit.numerics)

    [thresholds]
    strategies = ["oracle", "pot", "quantile"]   # and/or "alert-budget"
    pot_risk = 0.001                  # q of Siffer et al. (2017)
    pot_initial_quantile = 0.98       # level of the initial threshold t
    quantile_level = 0.99             # the "quantile" strategy: this quantile of train scores
    alert_budget = 1.0                # "alert-budget": false alerts allowed on train, per ...
    alert_budget_per = "day"          # ... day (needs the data's step) or "1000-steps"
    merge_gap = 0                     # alerts at most this many unpredicted steps apart merge

    [metrics]                         # fields of benchkit.metrics.MetricOptions
    ...

    [[datasets]]
    source = "demo"                   # "demo", or a path (relative to this file): a folder,
    name = ""                         #   .csv/.parquet/.npz/.toml; optional display name
    entities = []                     # optional subset of entity names
    [datasets.options]                # passed to the loader (demo sizes, loader options)

    [[detectors]]
    name = "isolation-forest"         # registered name, pyod:<Model> or module:Class
    label = "iforest-200"             # optional, unique; default = name
    [detectors.params]                # hyperparameters, validated against the detector schema
    n_estimators = 200
    [detectors.vary]                  # optional sensitivity sweep: one variant per value (the
    max_samples = [64, 256]           #   product over several keys), labelled
                                      #   "iforest-200/max_samples=64", each validated as params

    [[sweep]]                         # optional, see benchkit.noise.parse_sweeps
    kind = "multiplicative"
    levels = [0, 0.1, 0.3]
    apply_to = "both"

Every error is a :class:`benchkit.errors.SpecError` whose message starts with the key path,
for example ``detectors[2].params.window: expected an integer >= 2, got "ten"``.
"""

from __future__ import annotations

import dataclasses
import itertools
import json
import math
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any

from benchkit import registry
from benchkit.detector import shown
from benchkit.errors import DetectorNotFound, ParamError, SpecError
from benchkit.noise import CLEAN, Perturbation, format_number, parse_sweeps
from benchkit.windows import CONSTANT_CHANNEL_MODES

SCALINGS = ("zscore", "minmax", "none")
DEFAULT_CONSTANT_CHANNELS = "keep"
EXECUTORS = ("local", "dask")
NUMERICS_MODES = ("pinned", "fast")  # benchkit.numerics.MODES (the spec imports no runtime code)
STRATEGIES = ("oracle", "pot", "quantile", "alert-budget")
DEFAULT_STRATEGIES = ("oracle", "pot", "quantile")
BUDGET_UNITS = ("day", "1000-steps")
DEFAULT_SPEC_RESOURCE = "specs/default.toml"

_TOP_KEYS = (
    "name",
    "description",
    "seeds",
    "scaling",
    "constant_channels",
    "execution",
    "thresholds",
    "metrics",
    "datasets",
    "detectors",
    "sweep",
)


def show(value: Any) -> str:
    """A value as the user wrote it in TOML: strings in double quotes, lists and numbers plain."""
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(show(v) for v in value) + "]"
    if isinstance(value, dict):
        return "a table"
    return shown(value)


# ------------------------------------------------------------------------------- parts


@dataclass(frozen=True)
class DatasetSpec:
    """One ``[[datasets]]`` entry."""

    source: str
    name: str = ""
    entities: tuple[str, ...] = ()
    options: dict[str, Any] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {"source": self.source}
        if self.name:
            out["name"] = self.name
        if self.entities:
            out["entities"] = list(self.entities)
        if self.options:
            out["options"] = _plain(self.options)
        return out


@dataclass(frozen=True)
class DetectorSpec:
    """One detector variant: ``params`` as written, ``resolved`` with defaults filled in.

    A ``[[detectors]]`` entry with a ``vary`` table gives one DetectorSpec per combination of
    values; each keeps the entry's ``vary`` table, its own ``varied`` values (also merged into
    ``resolved``) and the entry's label as ``base``.
    """

    name: str
    label: str
    params: dict[str, Any] = field(default_factory=dict)
    resolved: dict[str, Any] = field(default_factory=dict, compare=False)
    vary: dict[str, list] = field(default_factory=dict)
    varied: dict[str, Any] = field(default_factory=dict)
    base: str = ""

    @property
    def takes_seed(self) -> bool:
        """Whether the detector declares a ``seed`` hyperparameter (set from the cell's seed)."""
        return "seed" in self.resolved

    def to_dict(self) -> dict[str, Any]:
        """The ``[[detectors]]`` entry as written (for a varied variant: its whole entry)."""
        out: dict[str, Any] = {"name": self.name}
        label = self.base if self.vary else self.label
        if label != self.name:
            out["label"] = label
        if self.params:
            out["params"] = _plain(self.params)
        if self.vary:
            out["vary"] = _plain(self.vary)
        return out


def vary_label(value: Any) -> str:
    """A varied value as written in a variant label: ``16``, ``0.001``, ``true``, ``learned``."""
    return value if isinstance(value, str) else format_number(value)


def vary_variants(base: str, vary: dict[str, list]) -> list[tuple[str, dict[str, Any]]]:
    """``(label, values)`` of every combination of a ``vary`` table, keys in the order written.

    Labels read ``base/key=value``, keys joined by commas: ``lstm-vae/window=16,hidden_size=8``.
    """
    keys = list(vary)
    out = []
    for combo in itertools.product(*(vary[k] for k in keys)):
        values = dict(zip(keys, combo, strict=True))
        text = ",".join(f"{k}={vary_label(v)}" for k, v in values.items())
        out.append((f"{base}/{text}", values))
    return out


def varied_variants(spec: dict[str, Any]) -> list[dict[str, Any]]:
    """The sensitivity sweeps of a spec written as plain data (``ExperimentSpec.to_dict()``).

    One dict per (variant, varied key): ``variant`` (its label), ``base`` (the entry's label),
    ``parameter``, ``value`` (as written), ``position`` (its index in the list) and ``others``
    (the other varied keys of that variant, as ``key=value`` text; ``""`` when one key varies).
    """
    out = []
    for entry in spec.get("detectors", []):
        vary = entry.get("vary") or {}
        base = entry.get("label") or entry["name"]
        for label, values in vary_variants(base, vary):
            for key, value in values.items():
                others = ",".join(
                    f"{k}={vary_label(v)}" for k, v in values.items() if k != key
                )
                out.append({"variant": label, "base": base, "parameter": key, "value": value,
                            "position": vary[key].index(value), "others": others})  # fmt: skip
    return out


@dataclass(frozen=True)
class ThresholdSpec:
    """``[thresholds]``: which strategies, the POT and quantile settings, and the alert budget
    (false alerts per day, or per 1,000 steps) with the gap that merges alerts."""

    strategies: tuple[str, ...] = DEFAULT_STRATEGIES
    pot_risk: float = 1e-3
    pot_initial_quantile: float = 0.98
    quantile_level: float = 0.99
    alert_budget: float = 1.0
    alert_budget_per: str = "day"
    merge_gap: int = 0

    def to_dict(self) -> dict[str, Any]:
        return {
            "strategies": list(self.strategies),
            "pot_risk": self.pot_risk,
            "pot_initial_quantile": self.pot_initial_quantile,
            "quantile_level": self.quantile_level,
            "alert_budget": self.alert_budget,
            "alert_budget_per": self.alert_budget_per,
            "merge_gap": self.merge_gap,
        }


@dataclass(frozen=True)
class ExecutionSpec:
    """``[execution]``: executor, workers (0 = available cores), scheduler, cell time limit and
    the numeric path of the workers (``pinned`` or ``fast``, :mod:`benchkit.numerics`)."""

    executor: str = "local"
    workers: int = 0
    scheduler: str = ""
    cell_time_limit: float = 600.0
    numerics: str = "pinned"

    def to_dict(self) -> dict[str, Any]:
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class ExperimentSpec:
    """A validated experiment spec; see the module docstring for the TOML layout."""

    name: str
    datasets: tuple[DatasetSpec, ...]
    detectors: tuple[DetectorSpec, ...]
    seeds: tuple[int, ...] = (0,)
    scaling: str = "zscore"
    constant_channels: str = DEFAULT_CONSTANT_CHANNELS
    description: str = ""
    execution: ExecutionSpec = ExecutionSpec()
    thresholds: ThresholdSpec = ThresholdSpec()
    metrics: dict[str, Any] = field(default_factory=dict)
    sweeps: tuple[dict[str, Any], ...] = ()
    source: str = field(default="", compare=False)
    base_dir: Path | None = field(default=None, compare=False)

    @property
    def perturbations(self) -> tuple[Perturbation, ...]:
        """The clean run first, then every sweep level (level 0 of any sweep is the clean run)."""
        out = [CLEAN]
        for p in parse_sweeps([dict(t) for t in self.sweeps]):
            if p not in out:
                out.append(p)
        return tuple(out)

    def to_dict(self) -> dict[str, Any]:
        """Plain data in the TOML layout; ``parse_spec(spec.to_dict())`` equals ``spec``."""
        out: dict[str, Any] = {"name": self.name}
        if self.description:
            out["description"] = self.description
        out["seeds"] = list(self.seeds)
        out["scaling"] = self.scaling
        out["constant_channels"] = self.constant_channels
        out["execution"] = self.execution.to_dict()
        out["thresholds"] = self.thresholds.to_dict()
        out["metrics"] = _plain(self.metrics)
        out["datasets"] = [d.to_dict() for d in self.datasets]
        entries, seen = [], set()
        for d in self.detectors:  # a varied entry is written once, with its vary table
            if d.vary and d.base in seen:
                continue
            seen.add(d.base)
            entries.append(d.to_dict())
        out["detectors"] = entries
        if self.sweeps:
            out["sweep"] = [_plain(t) for t in self.sweeps]
        return out

    def to_toml(self) -> str:
        """TOML text of :meth:`to_dict` (``tomllib.loads`` reads it back to the same dict)."""
        return dumps_toml(self.to_dict())

    def resolve_source(self, source: str) -> str:
        """A dataset source with a relative path taken relative to the spec file's folder."""
        if source == "demo" or self.base_dir is None or Path(source).is_absolute():
            return source
        return str(self.base_dir / source)


# ------------------------------------------------------------------------------- loading


def load_spec(path: str | Path) -> ExperimentSpec:
    """Read and validate a spec file; any problem raises SpecError naming the file or key."""
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise SpecError(f"{p}: no such spec file") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise SpecError(f"{p}: cannot read spec: {exc}") from None
    try:
        return parse_toml(text, str(p), base_dir=p.resolve().parent)
    except SpecError as exc:
        message = str(exc)
        if message.startswith(str(p)):
            raise
        raise SpecError(f"{p}: {message}") from None


def parse_toml(text: str, source: str, base_dir: Path | None = None) -> ExperimentSpec:
    """Validate spec TOML text; ``source`` names it in errors."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SpecError(f"{source}: not valid TOML: {exc}") from None
    return parse_spec(data, source, base_dir=base_dir)


def default_spec() -> ExperimentSpec:
    """The built-in default experiment (``benchkit/specs/default.toml``)."""
    return parse_toml(default_spec_text(), "default spec")


def default_spec_text() -> str:
    """The shipped default spec file, verbatim (what ``benchkit run --print-default`` prints)."""
    return resources.files("benchkit").joinpath(DEFAULT_SPEC_RESOURCE).read_text(encoding="utf-8")


def parse_spec(data: dict, source: str = "spec", base_dir: Path | None = None) -> ExperimentSpec:
    """Validate a parsed spec table; raise SpecError with the key path of the first problem."""
    if not isinstance(data, dict):
        raise SpecError(f"{source}: expected a table at the top level")
    _no_unknown(data, _TOP_KEYS, "")
    name = _text(data, "name", "", required=True)
    if not name.strip():
        raise SpecError("name: expected a non-empty string")
    seeds = _seeds(data.get("seeds", [0]))
    scaling = _choice(data.get("scaling", "zscore"), SCALINGS, "scaling")
    constant_channels = _choice(data.get("constant_channels", DEFAULT_CONSTANT_CHANNELS),
                                CONSTANT_CHANNEL_MODES, "constant_channels")
    execution = _execution(_table(data, "execution"))
    thresholds = _thresholds(_table(data, "thresholds"))
    metrics = _metrics(_table(data, "metrics"))
    datasets = _datasets(_array_of_tables(data, "datasets"))
    detectors = _detectors(_array_of_tables(data, "detectors"))
    sweeps = _array_of_tables(data, "sweep", required=False)
    parse_sweeps([dict(t) for t in sweeps], "sweep")  # validates; raises SpecError with the path
    return ExperimentSpec(
        name=name,
        description=_text(data, "description", ""),
        seeds=seeds,
        scaling=scaling,
        constant_channels=constant_channels,
        execution=execution,
        thresholds=thresholds,
        metrics=metrics,
        datasets=datasets,
        detectors=detectors,
        sweeps=tuple(_plain(t) for t in sweeps),
        source=source,
        base_dir=base_dir,
    )


def parse_evaluation(data: dict) -> tuple[ThresholdSpec, dict[str, Any]]:
    """Only the ``[thresholds]`` and ``[metrics]`` tables of a spec (what rescoring needs)."""
    return _thresholds(_table(data, "thresholds")), _metrics(_table(data, "metrics"))


# ------------------------------------------------------------------------------- sections


def _execution(t: dict) -> ExecutionSpec:
    _no_unknown(
        t, ("executor", "workers", "scheduler", "cell_time_limit", "numerics"), "execution"
    )
    d = ExecutionSpec()
    limit = _number(t.get("cell_time_limit", d.cell_time_limit), "execution.cell_time_limit")
    if limit <= 0:
        raise SpecError(f"execution.cell_time_limit: expected a number > 0, got {show(limit)}")
    return ExecutionSpec(
        executor=_choice(t.get("executor", d.executor), EXECUTORS, "execution.executor"),
        workers=_integer(t.get("workers", d.workers), "execution.workers", low=0),
        scheduler=_text(t, "scheduler", d.scheduler, where="execution.scheduler"),
        cell_time_limit=limit,
        numerics=_choice(t.get("numerics", d.numerics), NUMERICS_MODES, "execution.numerics"),
    )


def _thresholds(t: dict) -> ThresholdSpec:
    _no_unknown(
        t,
        ("strategies", "pot_risk", "pot_initial_quantile", "quantile_level", "alert_budget",
         "alert_budget_per", "merge_gap"),
        "thresholds",
    )
    d = ThresholdSpec()
    raw = t.get("strategies", list(d.strategies))
    if not isinstance(raw, list) or not raw:
        raise SpecError(
            "thresholds.strategies: expected a non-empty list of "
            f"{', '.join(STRATEGIES)}, got {show(raw)}"
        )
    strategies = tuple(
        _choice(s, STRATEGIES, f"thresholds.strategies[{i}]") for i, s in enumerate(raw)
    )
    if len(set(strategies)) != len(strategies):
        raise SpecError(f"thresholds.strategies: lists a strategy twice: {show(raw)}")
    initial = _unit(
        t.get("pot_initial_quantile", d.pot_initial_quantile), "thresholds.pot_initial_quantile"
    )
    risk = _unit(t.get("pot_risk", d.pot_risk), "thresholds.pot_risk")
    if risk >= 1.0 - initial:
        raise SpecError(
            f"thresholds.pot_risk: expected a number below 1 - pot_initial_quantile "
            f"= {1.0 - initial:g}, got {show(risk)}"
        )
    level = _unit(t.get("quantile_level", d.quantile_level), "thresholds.quantile_level")
    budget = _number(t.get("alert_budget", d.alert_budget), "thresholds.alert_budget")
    if budget < 0:
        raise SpecError(f"thresholds.alert_budget: expected a number >= 0, got {show(budget)}")
    per = _choice(t.get("alert_budget_per", d.alert_budget_per), BUDGET_UNITS,
                  "thresholds.alert_budget_per")
    gap = _integer(t.get("merge_gap", d.merge_gap), "thresholds.merge_gap", low=0)
    return ThresholdSpec(strategies, risk, initial, level, budget, per, gap)


def _metrics(t: dict) -> dict[str, Any]:
    """Check ``[metrics]`` against the fields (and their default types) of MetricOptions."""
    from benchkit.metrics import MetricOptions

    fields = {f.name: f for f in dataclasses.fields(MetricOptions)}
    _no_unknown(t, tuple(fields), "metrics")
    defaults = MetricOptions()
    out: dict[str, Any] = {}
    for key, value in t.items():
        where = f"metrics.{key}"
        default = getattr(defaults, key)
        out[key] = _like(value, default, where)
    try:
        metric_options(out)
    except (TypeError, ValueError) as exc:
        text = str(exc)
        raise SpecError(text if text.startswith("metrics.") else f"metrics: {text}") from None
    return out


def metric_options(values: dict[str, Any]) -> Any:
    """A :class:`benchkit.metrics.MetricOptions` from a validated ``[metrics]`` table."""
    from benchkit.metrics import MetricOptions

    return MetricOptions(**{k: tuple(v) if isinstance(v, list) else v for k, v in values.items()})


def _like(value: Any, default: Any, where: str) -> Any:
    """Check ``value`` has the type of ``default`` (numbers widen to float; lists for tuples)."""
    if isinstance(default, bool) or isinstance(value, bool):
        if not isinstance(value, bool) or not isinstance(default, bool):
            raise SpecError(f"{where}: expected {_kind_text(default)}, got {show(value)}")
        return value
    if isinstance(default, (tuple, list)):
        if not isinstance(value, list):
            raise SpecError(f"{where}: expected a list, got {show(value)}")
        if default:
            return [_like(v, default[0], f"{where}[{i}]") for i, v in enumerate(value)]
        return list(value)
    if isinstance(default, float):
        return _number(value, where)
    if isinstance(default, int):
        return _integer(value, where)
    if isinstance(default, str):
        if not isinstance(value, str):
            raise SpecError(f"{where}: expected a string, got {show(value)}")
        return value
    if default is None and isinstance(value, (int, float, str)):
        return value
    raise SpecError(f"{where}: expected {_kind_text(default)}, got {show(value)}")


def _kind_text(default: Any) -> str:
    for kind, text in (
        (bool, "a boolean"),
        (float, "a number"),
        (int, "an integer"),
        (str, "a string"),
    ):
        if isinstance(default, kind):
            return text
    return "a value"


def _datasets(tables: list[dict]) -> tuple[DatasetSpec, ...]:
    out = []
    for i, t in enumerate(tables):
        where = f"datasets[{i}]"
        _no_unknown(t, ("source", "name", "entities", "options"), where)
        source = _text(t, "source", "", required=True, where=f"{where}.source")
        if not source:
            raise SpecError(f'{where}.source: expected "demo" or a path, got ""')
        entities = t.get("entities", [])
        if not isinstance(entities, list) or not all(isinstance(e, str) for e in entities):
            raise SpecError(
                f"{where}.entities: expected a list of entity names, got {show(entities)}"
            )
        if len(set(entities)) != len(entities):
            raise SpecError(f"{where}.entities: names an entity twice: {show(entities)}")
        options = _table(t, "options", where=f"{where}.options")
        out.append(
            DatasetSpec(
                source,
                _text(t, "name", "", where=f"{where}.name"),
                tuple(entities),
                _plain(options),
            )
        )
    return tuple(out)


def _detectors(tables: list[dict]) -> tuple[DetectorSpec, ...]:
    out: list[DetectorSpec] = []
    labels: dict[str, str] = {}
    configs: dict[str, str] = {}
    for i, t in enumerate(tables):
        where = f"detectors[{i}]"
        _no_unknown(t, ("name", "label", "params", "vary"), where)
        name = _text(t, "name", "", required=True, where=f"{where}.name")
        label = _text(t, "label", name, where=f"{where}.label") or name
        params = _table(t, "params", where=f"{where}.params")
        try:
            cls = registry.get(name)
        except DetectorNotFound as exc:
            raise SpecError(f"{where}.name: {exc}") from None
        resolved = validate_params(cls, params, f"{where}.params")
        if "seed" in params and "seed" in resolved:
            raise SpecError(
                f"{where}.params.seed: set by the experiment's seeds list; remove it here"
            )
        vary = _vary(cls, t, params, resolved, where)
        variants = vary_variants(label, vary) if vary else [(label, {})]
        for variant, values in variants:
            full = validate_params(cls, {**params, **values}, f"{where}.params") if values \
                else resolved
            _unique_variant(name, variant, full, labels, configs, where)
            out.append(DetectorSpec(name, variant, _plain(params), full, _plain(vary),
                                    dict(values), label if vary else ""))  # fmt: skip
    return tuple(out)


def _unique_variant(name: str, label: str, resolved: dict[str, Any], labels: dict[str, str],
                    configs: dict[str, str], where: str) -> None:  # fmt: skip
    """Refuse a variant whose label, or whose detector and parameters, an earlier one has."""
    if label in labels:
        raise SpecError(
            f"{where}.label: {show(label)} is already used by {labels[label]}; "
            "give each variant its own label"
        )
    config = json.dumps([name, resolved], sort_keys=True, default=str)
    if config in configs:
        raise SpecError(f"{where}: same detector and parameters as {configs[config]}")
    labels[label], configs[config] = where, where


def _vary(cls: Any, t: dict, params: dict, resolved: dict, where: str) -> dict[str, list]:
    """Check a ``vary`` table: known hyperparameters, non-empty lists of valid, distinct values,
    none also in ``params`` and not ``seed``."""
    vary = _table(t, "vary", where=f"{where}.vary")
    for key, values in vary.items():
        path = f"{where}.vary.{key}"
        if key in params:
            raise SpecError(f"{path}: also set in {where}.params; give it in one place")
        if key == "seed" and "seed" in resolved:
            raise SpecError(f"{path}: set by the experiment's seeds list; remove it here")
        if key not in resolved:
            try:
                cls.validate_params({key: None}, f"{where}.vary")
            except ParamError as exc:
                raise SpecError(str(exc)) from None
        if not isinstance(values, list) or not values:
            raise SpecError(f"{path}: expected a non-empty list of values, got {show(values)}")
        for j, value in enumerate(values):
            try:
                cls.validate_params({key: value}, "")
            except ParamError as exc:
                raise SpecError(f"{path}[{j}]{str(exc).removeprefix(key)}") from None
        if len({json.dumps(v) for v in values}) != len(values):
            raise SpecError(f"{path}: lists a value twice: {show(values)}")
    return vary


def validate_params(cls: Any, params: dict[str, Any], where: str) -> dict[str, Any]:
    """Check detector ``params`` against ``cls``'s schema; return them with defaults filled in.

    Errors read ``<where>.<param>: expected <what the schema says>, got <value as in TOML>``.
    """
    try:
        return cls.validate_params(params, where)
    except ParamError as exc:
        raise SpecError(str(exc)) from None


# ------------------------------------------------------------------------------- scalars


def _no_unknown(t: dict, allowed: tuple[str, ...], where: str) -> None:
    for key in t:
        if key not in allowed:
            path = f"{where}.{key}" if where else key
            raise SpecError(f"{path}: unknown key; valid here: {', '.join(allowed)}")


def _table(t: dict, key: str, where: str = "") -> dict:
    value = t.get(key, {})
    if not isinstance(value, dict):
        raise SpecError(f"{where or key}: expected a table, got {show(value)}")
    return value


def _array_of_tables(t: dict, key: str, required: bool = True) -> list[dict]:
    value = t.get(key)
    if value is None:
        if required:
            raise SpecError(f"{key}: missing; add at least one [[{key}]] table")
        return []
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise SpecError(f"{key}: expected an array of tables ([[{key}]]), got {show(value)}")
    if required and not value:
        raise SpecError(f"{key}: expected at least one [[{key}]] table")
    return value


def _text(t: dict, key: str, default: str, required: bool = False, where: str = "") -> str:
    where = where or key
    if key not in t:
        if required:
            raise SpecError(f"{where}: missing (required)")
        return default
    value = t[key]
    if not isinstance(value, str):
        raise SpecError(f"{where}: expected a string, got {show(value)}")
    return value


def _choice(value: Any, choices: tuple[str, ...], where: str) -> str:
    if value not in choices or not isinstance(value, str):
        raise SpecError(f"{where}: expected one of {', '.join(choices)}, got {show(value)}")
    return value


def _integer(value: Any, where: str, low: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or (low is not None and value < low):
        bound = f" >= {low}" if low is not None else ""
        raise SpecError(f"{where}: expected an integer{bound}, got {show(value)}")
    return value


def _number(value: Any, where: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise SpecError(f"{where}: expected a number, got {show(value)}")
    return float(value)


def _unit(value: Any, where: str) -> float:
    """A number strictly between 0 and 1."""
    v = _number(value, where)
    if not 0.0 < v < 1.0:
        raise SpecError(f"{where}: expected a number in (0, 1), got {show(value)}")
    return v


def _seeds(value: Any) -> tuple[int, ...]:
    if not isinstance(value, list) or not value:
        raise SpecError(f"seeds: expected a non-empty list of integers >= 0, got {show(value)}")
    seeds = tuple(_integer(s, f"seeds[{i}]", low=0) for i, s in enumerate(value))
    if len(set(seeds)) != len(seeds):
        raise SpecError(f"seeds: lists a seed twice: {show(value)}")
    return seeds


def _plain(value: Any) -> Any:
    """A deep copy made of dicts, lists and scalars only (tuples become lists)."""
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


# ------------------------------------------------------------------------------- TOML out


def dumps_toml(data: dict[str, Any]) -> str:
    """TOML text for a dict of scalars, lists of scalars, tables and arrays of tables."""
    lines: list[str] = []
    _emit_table(data, [], lines)
    return "\n".join(lines).strip() + "\n"


def _emit_table(data: dict[str, Any], path: list[str], lines: list[str]) -> None:
    nested = []
    for key, value in data.items():
        if isinstance(value, dict) or (
            isinstance(value, list) and value and isinstance(value[0], dict)
        ):
            nested.append((key, value))
        else:
            lines.append(f"{_key(key)} = {_toml_value(value)}")
    for key, value in nested:
        sub = [*path, _key(key)]
        if isinstance(value, dict):
            lines.extend(["", f"[{'.'.join(sub)}]"])
            _emit_table(value, sub, lines)
        else:
            for item in value:
                lines.extend(["", f"[[{'.'.join(sub)}]]"])
                _emit_table(item, sub, lines)


def _key(key: str) -> str:
    bare = key and all(c.isalnum() or c in "-_" for c in key) and key.isascii()
    return key if bare else json.dumps(key)


def _toml_value(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        if math.isnan(value):
            return "nan"
        if math.isinf(value):
            return "inf" if value > 0 else "-inf"
        return repr(value)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml_value(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} as TOML")
