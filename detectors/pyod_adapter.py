"""PyOD detectors by name (``pyod:<Model>``), all on the same causal window features.

``pyod:ECOD``, ``pyod:COPOD``, ``pyod:LOF`` and ``pyod:KNN`` are registered with declared
hyperparameters. Any other model ``pyod:<Model>`` (class ``<Model>`` in ``pyod.models.<model>``)
is built on demand; its hyperparameters are read from the model's constructor (those whose default
is a bool, int, float or string). Run ``benchkit check-detector pyod:<Model>`` before trusting one:
the contract kit tells whether its scores are causal.

ECOD (Li et al., 2022) and COPOD (Li et al., 2020) score a batch in PyOD by pooling it with the
training data, so a step's score would depend on later steps. Here each feature row is scored
as PyOD scores a batch of that single row: its empirical tail probabilities among the training
rows plus itself, and the skewness sign of the training rows plus itself. The tests check this
against PyOD's own models called one row at a time.
"""

from __future__ import annotations

import importlib
import inspect
from typing import Any, ClassVar

import numpy as np

from benchkit.detector import WARMUP_SCORE, Param, check_series
from benchkit.errors import DetectorNotFound
from benchkit.registry import get, register, register_family
from detectors._features import (
    FeatureModelDetector,
    derived_seed,
    window_features,
    window_params,
)

# constructor arguments the adapter sets itself or that concern thresholds, not scores
_RESERVED = {"contamination", "n_jobs", "random_state", "verbose", "novelty"}


class PyodDetector(FeatureModelDetector):
    """Base of the adapters: a PyOD model fitted on window-feature rows."""

    model_name: ClassVar[str] = ""
    model_module: ClassVar[str] = ""
    model_params: ClassVar[tuple[str, ...]] = ()  # declared params passed to the constructor

    def _fit_model(self, rows: np.ndarray, rng: np.random.Generator) -> Any:
        model_cls = getattr(importlib.import_module(self.model_module), self.model_name)
        kwargs = {name: getattr(self, name) for name in self.model_params}
        accepted = inspect.signature(model_cls.__init__).parameters
        if "random_state" in accepted:
            kwargs["random_state"] = derived_seed(rng)
        if "n_jobs" in accepted:
            kwargs["n_jobs"] = 1
        return model_cls(**kwargs).fit(rows)

    def _score_rows(self, rows: np.ndarray) -> np.ndarray:
        return np.asarray(self.model_.decision_function(rows), dtype=np.float64)

    def __reduce__(self):
        # classes built on demand live in a cache, not under their qualname: rebuild by name
        return (_rebuild, (self.name, dict(self.__dict__)))


def _rebuild(name: str, state: dict) -> PyodDetector:
    cls = get(name)
    obj = cls.__new__(cls)
    obj.__dict__.update(state)
    return obj


class _TailModel:
    """Inductive ECOD/COPOD scoring of rows against fixed training rows (see module docstring)."""

    def __init__(self, train_rows: np.ndarray, combine: str) -> None:
        self.combine = combine
        self.sorted_ = np.sort(train_rows, axis=0)
        self.n_ = train_rows.shape[0]
        self.shift_ = train_rows.mean(axis=0)
        y = train_rows - self.shift_
        self.sums_ = (y.sum(axis=0), (y**2).sum(axis=0), (y**3).sum(axis=0))

    def _skew_sign(self, rows: np.ndarray) -> np.ndarray:
        # sign of the third central moment of (training rows + this row), per row and column
        u = rows - self.shift_
        count = self.n_ + 1
        a1 = (self.sums_[0] + u) / count
        a2 = (self.sums_[1] + u**2) / count
        a3 = (self.sums_[2] + u**3) / count
        return np.sign(a3 - 3.0 * a1 * a2 + 2.0 * a1**3)

    def decision_function(self, rows: np.ndarray) -> np.ndarray:
        return self.outlying(rows).sum(axis=1)

    def outlying(self, rows: np.ndarray) -> np.ndarray:
        """Per-feature outlying values ``(m, features)``; the score is their sum."""
        n = self.n_
        below = np.empty(rows.shape)
        above = np.empty(rows.shape)
        for j in range(rows.shape[1]):  # a loop over feature columns, not over time steps
            col = self.sorted_[:, j]
            below[:, j] = np.searchsorted(col, rows[:, j], side="right")
            above[:, j] = n - np.searchsorted(col, rows[:, j], side="left")
        u_left = -np.log((below + 1.0) / (n + 1.0))
        u_right = -np.log((above + 1.0) / (n + 1.0))
        skew = self._skew_sign(rows)
        u_skew = u_left * -np.sign(skew - 1) + u_right * np.sign(skew + 1)
        if self.combine == "ecod":
            outlying = np.maximum(u_skew, np.maximum(u_left, u_right))
        else:
            outlying = np.maximum(u_skew, (u_left + u_right) / 2.0)
        return outlying


class _TailDetector(PyodDetector):
    """ECOD/COPOD with attributions: a channel's share is the sum of the outlying values of its
    features (last point, mean, ...), the per-dimension scores both papers propose for
    explaining a detection (Li et al., 2020 and 2022)."""

    combine: ClassVar[str] = "ecod"
    attributes = True

    def _fit_model(self, rows: np.ndarray, rng: np.random.Generator) -> _TailModel:
        return _TailModel(rows, self.combine)

    def attribute(self, series: np.ndarray) -> np.ndarray:
        series = check_series(series, "series", self.n_channels_)
        n, d = series.shape
        out = np.full((n, d), WARMUP_SCORE)
        if n >= self.window:
            values = self.model_.outlying(window_features(series, self.window, self.features))
            out[self.window - 1 :] = values.reshape(values.shape[0], -1, d).sum(axis=1)
        return out


@register
class PyodECOD(_TailDetector):
    name = "pyod:ECOD"
    description = "ECOD empirical-CDF tail probabilities (PyOD definition) on window features"
    model_name, model_module, combine = "ECOD", "pyod.models.ecod", "ecod"


@register
class PyodCOPOD(_TailDetector):
    name = "pyod:COPOD"
    description = "COPOD empirical-copula tail probabilities (PyOD definition) on window features"
    model_name, model_module, combine = "COPOD", "pyod.models.copod", "copod"


@register
class PyodLOF(PyodDetector):
    name = "pyod:LOF"
    description = "local outlier factor (PyOD LOF) on window features, training rows subsampled"
    model_name, model_module, model_params = "LOF", "pyod.models.lof", ("n_neighbors",)
    params = window_params(max_train=2000) + (
        Param("n_neighbors", int, 20, "neighbourhood size", low=1, high=1000),
    )


@register
class PyodKNN(PyodDetector):
    name = "pyod:KNN"
    description = "k-nearest-neighbour distance (PyOD KNN) on window features, rows subsampled"
    model_name, model_module = "KNN", "pyod.models.knn"
    model_params = ("n_neighbors", "method")
    params = window_params(max_train=2000) + (
        Param("n_neighbors", int, 5, "neighbours", low=1, high=1000),
        Param("method", str, "largest", "distance used: to the k-th, mean or median neighbour",
              choices=("largest", "mean", "median")),
    )


_BUILT: dict[str, type[PyodDetector]] = {}
_SIMPLE_TYPES = (bool, int, float, str)


def _constructor_params(model_cls: type) -> tuple[Param, ...]:
    taken = {p.name for p in window_params()}
    found = []
    for arg in inspect.signature(model_cls.__init__).parameters.values():
        default = arg.default
        if arg.name in _RESERVED or arg.name in taken or arg.name == "self":
            continue
        if type(default) in _SIMPLE_TYPES:
            found.append(Param(arg.name, type(default), default, f"PyOD {arg.name}"))
    return tuple(found)


def pyod_class(name: str) -> type[PyodDetector]:
    """Resolver for ``pyod:<Model>``: an adapter class for class ``<Model>`` of ``pyod.models``."""
    model = name.partition(":")[2]
    if model in _BUILT:
        return _BUILT[model]
    module = f"pyod.models.{model.lower()}"
    try:
        model_cls = getattr(importlib.import_module(module), model)
    except (ImportError, AttributeError):
        raise DetectorNotFound(
            f"unknown detector {name!r}: no class {model!r} in {module}; "
            "registered: pyod:COPOD, pyod:ECOD, pyod:KNN, pyod:LOF"
        ) from None
    own = _constructor_params(model_cls)
    cls = type(
        f"Pyod{model}",
        (PyodDetector,),
        {
            "name": name,
            "description": f"PyOD {model} on window features (built on demand)",
            "params": window_params() + own,
            "model_name": model,
            "model_module": module,
            "model_params": tuple(p.name for p in own),
            "__module__": __name__,
        },
    )
    _BUILT[model] = cls
    return cls


register_family("pyod", pyod_class)
