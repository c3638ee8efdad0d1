"""The detector registry: built-ins, entry points ``benchkit.detectors``, ``module:Class`` paths.

The only global state in benchkit.
"""

from __future__ import annotations

import importlib
import warnings
from importlib.metadata import entry_points
from typing import Any

from benchkit.detector import Detector
from benchkit.errors import DetectorNotFound

ENTRY_POINT_GROUP = "benchkit.detectors"
BUILTIN_MODULES = (
    "detectors.baselines",
    "detectors.isolation_forest",
    "detectors.pca_residual",
    "detectors.correlation_break",
    "detectors.shape_clusters",
    "detectors.pyod_adapter",
    "detectors.lstm_vae",
    "detectors.factorized_vae",
)

_REGISTRY: dict[str, type[Detector]] = {}
_LOAD_ERRORS: dict[str, str] = {}
_loaded = False


def register(cls: type[Detector]) -> type[Detector]:
    """Class decorator: add a built-in detector under ``cls.name``."""
    if not cls.name:
        raise TypeError(f"{cls.__qualname__} declares no name")
    existing = _REGISTRY.get(cls.name)
    if existing is not None and existing is not cls:
        raise TypeError(f"detector name {cls.name!r} registered twice")
    _REGISTRY[cls.name] = cls
    return cls


def _load() -> None:
    global _loaded
    if _loaded:
        return
    _loaded = True
    for module in BUILTIN_MODULES:
        try:
            importlib.import_module(module)
        except ModuleNotFoundError as exc:
            if exc.name == module:  # not written yet / removed: not an error of a plug-in
                continue
            _LOAD_ERRORS[module] = f"{type(exc).__name__}: {exc}"
        except Exception as exc:  # a broken plug-in must not take the others down
            _LOAD_ERRORS[module] = f"{type(exc).__name__}: {exc}"
    for ep in entry_points(group=ENTRY_POINT_GROUP):
        try:
            cls = ep.load()
            _check_class(cls, f"entry point {ep.name!r}")
            holder = _REGISTRY.setdefault(cls.name, cls)
            if holder is not cls:
                taken = f"{holder.__module__}.{holder.__qualname__}"
                raise TypeError(f"name {cls.name!r} is already taken by {taken}")
        except Exception as exc:
            _LOAD_ERRORS[f"entry point {ep.name} ({ep.value})"] = f"{type(exc).__name__}: {exc}"
    for where, msg in _LOAD_ERRORS.items():
        warnings.warn(f"benchkit: detector plug-in {where} failed to load: {msg}", stacklevel=2)


def _check_class(cls: Any, where: str) -> None:
    if not (isinstance(cls, type) and issubclass(cls, Detector) and cls.name):
        raise TypeError(f"{where} is not a named benchkit Detector subclass")


def load_errors() -> dict[str, str]:
    """Plug-ins that failed to import, by module or entry point, with the error."""
    _load()
    return dict(_LOAD_ERRORS)


def available() -> list[str]:
    """Sorted names of every registered detector."""
    _load()
    return sorted(_REGISTRY)


def get(name: str) -> type[Detector]:
    """The detector class for a registered name, a family member (``pyod:LOF``) or ``module:Class``.

    Raises
    ------
    DetectorNotFound
        With the list of valid names, or the reason a ``module:Class`` path did not load.
    """
    _load()
    if name in _REGISTRY:
        return _REGISTRY[name]
    prefix, colon, member = name.partition(":")
    if colon and prefix in _RESOLVERS:
        return _RESOLVERS[prefix](name)
    if colon and prefix and member:
        return _load_path(name, prefix, member)
    raise DetectorNotFound(
        f"unknown detector {name!r}; available: {', '.join(available())} (or module:Class)"
    )


def _load_path(name: str, module: str, attr: str) -> type[Detector]:
    try:
        cls = getattr(importlib.import_module(module), attr)
    except Exception as exc:  # any failure of a user's module is reported, by name, in one line
        raise DetectorNotFound(
            f"cannot load detector {name!r}: {type(exc).__name__}: {exc}"
        ) from None
    try:
        _check_class(cls, name)
    except TypeError as exc:
        raise DetectorNotFound(str(exc)) from None
    return cls


# prefix -> function(name) -> class, for families such as ``pyod:<Model>``
_RESOLVERS: dict[str, Any] = {}


def register_family(prefix: str, resolver: Any) -> None:
    """Register a resolver for names ``prefix:<member>`` (e.g. ``pyod:ECOD``).

    ``resolver(name) -> type[Detector]`` is called for names not registered directly; it raises
    :class:`DetectorNotFound` for members it does not know.
    """
    _RESOLVERS[prefix] = resolver


def create(name: str, where: str = "", **params: Any) -> Detector:
    """An instance of detector ``name`` with validated ``params`` (defaults filled in).

    ``where`` (e.g. ``detectors[2].params``) prefixes the key path in a :class:`ParamError`.
    """
    cls = get(name)
    return cls(**cls.validate_params(params, where))
