"""The detector interface and its hyperparameter schema.

A detector is a class with declared metadata (``name``, ``description``, ``params``,
``needs_torch``) and three methods:

* ``__init__(**params)`` only stores hyperparameters, unchanged (defaults from the schema);
* ``fit(train)`` learns from an already scaled ``(n, d)`` float64 array and returns ``self``;
* ``score(series)`` returns one float64 per step, higher = more anomalous, causal
  (the score at t uses only points <= t).

Optionally, a detector whose class sets ``attributes = True`` implements
``attribute(series) -> (n, d)`` float64: each channel's contribution to the score at each step,
higher = more to blame, with the alignment, causality and warm-up rows (all
:data:`WARMUP_SCORE`) of ``score``. The protocol uses it to check whether the channels a
detector blames are the labelled culprit KPIs (HitRate@P%, NDCG@P%).

The first ``warmup`` steps of a scored series (before the first full window) get
:data:`WARMUP_SCORE` (``-inf``): no threshold ``score >= theta`` with a finite theta can turn
them into a detection. The protocol gives every detector ``warmup`` steps of context from the
end of the train series, so every test step is scored by every detector.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass
from typing import Any, ClassVar

import numpy as np

from benchkit.errors import ParamError

WARMUP_SCORE: float = -math.inf

_KIND_NAMES = {int: "an integer", float: "a number", bool: "a boolean", str: "a string"}


def shown(value: Any) -> str:
    """A value as written in a TOML spec: strings in double quotes, booleans in lower case."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    return repr(value)


@dataclass(frozen=True)
class Param:
    """One hyperparameter, declared as data.

    Parameters
    ----------
    name, kind, default : the keyword, its Python type (int, float, bool, str) and default.
    low, high : inclusive bounds for numbers (``None`` = unbounded).
    choices : allowed values for strings (or numbers).
    help : one line for listings.
    nullable : whether ``None`` is accepted.
    """

    name: str
    kind: type
    default: Any
    help: str = ""
    low: float | None = None
    high: float | None = None
    choices: tuple | None = None
    nullable: bool = False

    def describe(self) -> str:
        """Short text for the expected value, e.g. ``an integer >= 2``."""
        text = _KIND_NAMES.get(self.kind, self.kind.__name__)
        if self.choices is not None:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        if self.low is not None and self.high is not None:
            text += f" in [{self.low}, {self.high}]"
        elif self.low is not None:
            text += f" >= {self.low}"
        elif self.high is not None:
            text += f" <= {self.high}"
        if self.nullable:
            text += " or none"
        return text

    def validate(self, value: Any, where: str = "") -> Any:
        """Return ``value`` (an int widened to float for a float) or raise ParamError."""
        where = where or self.name
        if value is None:
            if self.nullable:
                return None
            raise ParamError(f"{where}: expected {self.describe()}, got none")
        ok = isinstance(value, self.kind) and not (
            self.kind is not bool and isinstance(value, bool)
        )
        if self.kind is float and isinstance(value, int) and not isinstance(value, bool):
            value, ok = float(value), True
        if not ok:
            raise ParamError(f"{where}: expected {self.describe()}, got {shown(value)}")
        if self.kind is float and not math.isfinite(value):
            raise ParamError(f"{where}: expected {self.describe()}, got {shown(value)}")
        if self.choices is not None and value not in self.choices:
            raise ParamError(f"{where}: expected {self.describe()}, got {shown(value)}")
        if (self.low is not None and value < self.low) or (
            self.high is not None and value > self.high
        ):
            raise ParamError(f"{where}: expected {self.describe()}, got {shown(value)}")
        return value


class Detector:
    """Base class of every detector; see the module docstring for the contract."""

    name: ClassVar[str] = ""
    description: ClassVar[str] = ""
    params: ClassVar[tuple[Param, ...]] = ()
    needs_torch: ClassVar[bool] = False
    attributes: ClassVar[bool] = False
    """True when :meth:`attribute` gives per-channel contributions (see the module docstring)."""

    def __init__(self, **params: Any) -> None:
        declared = {p.name: p for p in self.params}
        unknown = sorted(set(params) - set(declared))
        if unknown:
            raise ParamError(
                f"{self.name or type(self).__name__}: unknown hyperparameter {unknown[0]!r}; "
                f"valid: {', '.join(sorted(declared)) or '(none)'}"
            )
        for p in self.params:
            setattr(self, p.name, params.get(p.name, p.default))

    @classmethod
    def schema(cls) -> dict[str, Param]:
        """The declared hyperparameters by name."""
        return {p.name: p for p in cls.params}

    @classmethod
    def validate_params(cls, params: dict[str, Any], where: str = "") -> dict[str, Any]:
        """Check ``params`` against the schema; return them with defaults filled in."""
        schema = cls.schema()
        prefix = f"{where}." if where else ""
        for key in params:
            if key not in schema:
                raise ParamError(
                    f"{prefix}{key}: unknown hyperparameter of {cls.name!r}; "
                    f"valid: {', '.join(sorted(schema)) or '(none)'}"
                )
        out = {}
        for name, p in schema.items():
            out[name] = p.validate(params[name], prefix + name) if name in params else p.default
        return out

    def get_params(self) -> dict[str, Any]:
        """The hyperparameters as stored by ``__init__`` (read back by introspection)."""
        return {p.name: getattr(self, p.name) for p in self.params}

    @property
    def warmup(self) -> int:
        """Number of leading steps scored :data:`WARMUP_SCORE`; 0 unless a window is used."""
        window = getattr(self, "window", None)
        return int(window) - 1 if isinstance(window, int) and window > 1 else 0

    def threshold_hint(self, train_scores: np.ndarray) -> float | None:
        """Optional threshold suggested by the method itself (e.g. a control limit); ``None``."""
        return None

    def training_record(self) -> dict[str, Any] | None:
        """How the last fit trained, for detectors trained epoch by epoch; ``None`` otherwise.

        A record holds ``train_loss`` and ``validation_loss`` (one float per epoch),
        ``best_epoch``, ``stop_epoch`` (from 0) and ``stop_reason`` (``"patience"``,
        ``"max_epochs"`` or ``"non-finite"``); the protocol stores it with the cell.
        """
        return None

    def fit(self, train: np.ndarray) -> Detector:  # pragma: no cover - interface
        raise NotImplementedError

    def score(self, series: np.ndarray) -> np.ndarray:  # pragma: no cover - interface
        raise NotImplementedError

    def attribute(self, series: np.ndarray) -> np.ndarray:
        """Per-channel contributions ``(n, d)`` to the score of each step (only when
        ``attributes`` is True); warm-up rows hold :data:`WARMUP_SCORE`."""
        raise NotImplementedError(f"{self.name or type(self).__name__}: no attribution")

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={v!r}" for k, v in self.get_params().items())
        return f"{type(self).__name__}({args})"


def check_series(
    series: np.ndarray, what: str = "series", n_channels: int | None = None
) -> np.ndarray:
    """Validate a detector input: 2-D, finite, float64; raise ValueError with a clear message."""
    arr = np.asarray(series)
    if arr.ndim != 2:
        raise ValueError(
            f"{what}: expected a 2-D (n_steps, n_channels) array, got shape {arr.shape}"
        )
    if n_channels is not None and arr.shape[1] != n_channels:
        raise ValueError(f"{what}: expected {n_channels} channels (as in fit), got {arr.shape[1]}")
    arr = arr.astype(np.float64, copy=False)
    if not np.isfinite(arr).all():
        bad = np.argwhere(~np.isfinite(arr))[0]
        raise ValueError(
            f"{what}: non-finite value at step {bad[0]}, channel {bad[1]}; "
            "detectors refuse NaN/inf (fill missing values before scoring)"
        )
    return arr
