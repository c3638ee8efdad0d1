"""Noise models for the robustness sweep.

A :class:`Perturbation` names one noise model at one level. :func:`apply_perturbation` applies
it to the raw (unscaled) train and/or test series of one entity and returns new arrays; labels
are never an argument, so noise can never turn into (or remove) a labelled anomaly.

Kinds and what ``level`` means (``s_c`` is channel c's standard deviation over the clean train
series, ``m_c`` its mean):

``additive``
    ``x + e``, ``e ~ N(0, (level * s_c)^2)`` independently per step and channel.
``multiplicative``
    ``x * (1 + e)``, ``e ~ N(0, level^2)``: the noise grows with the signal.
``impulse``
    heavy-tailed noise, option ``mode``: ``"student-t"`` adds ``level * s_c * T`` with
    ``T ~ Student-t(df)`` (option ``df``, default 3); ``"spikes"`` adds isolated spikes of
    ``+-magnitude * s_c`` (option ``magnitude``, default 5) at each step and channel with
    probability ``level`` (a rate, at most 1).
``missing``
    each step and channel starts a missing stretch of ``gap_length`` steps (option, default 1 =
    isolated dropouts) with probability ``level`` (a rate, below 1); option ``scope = "row"``
    drops every channel of a step together. The holes are then filled (option ``fill``):
    ``"ffill"`` (default) carries the last observed value forward, ``"zero"`` writes 0,
    ``"mean"`` writes ``m_c``; a hole with nothing before it gets ``m_c``. The result is finite.
``drift``
    channel-wise gain drift: ``x[t, c] * (1 + level * u_c * t / (n - 1))`` with
    ``u_c ~ N(0, 1)`` drawn once per channel and series.

A channel that is constant in train has ``s_c = 0`` and gets no additive or impulse noise.
Level 0 of any kind is :data:`CLEAN`, the unperturbed run.

Randomness: the stream is ``numpy.random.default_rng`` of a seed sequence built from the cell
seed, the fixed tag :data:`NOISE_TAG` and a sha256 of the entity name, the noise kind and its
options, with one sub-stream for train and one for test. It therefore never coincides with a
detector's ``default_rng(seed)`` stream, and it is the same on every run and machine.
The level and ``apply_to`` are left out of the stream on purpose (common random numbers): the
levels of one sweep scale the *same* draws (additive, multiplicative, drift, Student-t), and the
dropout and spike masks of a higher rate contain those of a lower one, so a sweep curve shows the
effect of the level, not a fresh noise sample at each level; and "train" and "both" perturb the
train part identically.
"""

from __future__ import annotations

import hashlib
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from benchkit.detector import Param, shown
from benchkit.errors import ParamError, SpecError

NOISE_KINDS: tuple[str, ...] = ("additive", "multiplicative", "impulse", "missing", "drift")
APPLY_TO: tuple[str, ...] = ("train", "test", "both")
CLEAN_KIND = "none"
NOISE_TAG = 0x6E6F6973  # fixed word mixed into every noise seed ("nois" in ASCII)

_IMPULSE_MODES = ("student-t", "spikes")
_OPTIONS: dict[str, tuple[Param, ...]] = {
    "additive": (),
    "multiplicative": (),
    "impulse": (
        Param(
            "mode",
            str,
            "student-t",
            "student-t innovations or isolated spikes",
            choices=_IMPULSE_MODES,
        ),
        Param("df", float, 3.0, "degrees of freedom of the Student-t noise", low=1.0),
        Param("magnitude", float, 5.0, "spike size in train standard deviations", low=0.0),
    ),
    "missing": (
        Param("gap_length", int, 1, "steps per missing stretch", low=1),
        Param("fill", str, "ffill", "how holes are filled", choices=("ffill", "zero", "mean")),
        Param(
            "scope",
            str,
            "channel",
            "drop single channels or whole rows",
            choices=("channel", "row"),
        ),
    ),
    "drift": (),
}
# options that only apply to one impulse mode
_MODE_ONLY = {"df": "student-t", "magnitude": "spikes"}
# kinds whose level is a probability: (upper bound, whether the bound itself is allowed)
_RATE_LIMIT = {"missing": (1.0, False)}


def format_number(x: float | int) -> str:
    """Shortest round-trip text of a number, as used in keys: ``0.1``, ``3`` (not ``3.0``)."""
    if isinstance(x, (bool, np.bool_)):
        return str(bool(x)).lower()
    if isinstance(x, (int, np.integer)):
        return str(int(x))
    text = repr(float(x))
    return text[:-2] if text.endswith(".0") else text


def _fmt_value(v: Any) -> str:
    return v if isinstance(v, str) else format_number(v)


def _prefix(where: str) -> str:
    return f"{where}." if where else ""


def _check_level(kind: str, level: Any, options: dict[str, Any], where: str) -> float:
    if isinstance(level, (bool, np.bool_)) or not isinstance(level, (int, float, np.number)):
        raise SpecError(f"{where}: expected a number >= 0, got {shown(level)}")
    value = float(level)
    if not math.isfinite(value) or value < 0:
        raise SpecError(f"{where}: expected a number >= 0, got {shown(level)}")
    high, inclusive = _RATE_LIMIT.get(kind, (math.inf, True))
    if kind == "impulse" and options.get("mode") == "spikes":
        high, inclusive = 1.0, True
    if value > high or (value == high and not inclusive):
        bound = f"<= {format_number(high)}" if inclusive else f"< {format_number(high)}"
        raise SpecError(f"{where}: a rate for kind {kind!r} must be {bound}, got {shown(level)}")
    return value


def _check_options(kind: str, options: Mapping[str, Any], where: str) -> dict[str, Any]:
    """Validate ``options`` for ``kind``; return the relevant ones with defaults filled in."""
    schema = {p.name: p for p in _OPTIONS[kind]}
    prefix = _prefix(where)
    for name in options:
        if name not in schema:
            valid = ", ".join(sorted(schema)) or "(none)"
            raise SpecError(
                f"{prefix}{name}: unknown option of noise kind {kind!r}; valid: {valid}"
            )
    out: dict[str, Any] = {}
    for name, param in schema.items():
        try:
            out[name] = (
                param.validate(options[name], prefix + name) if name in options else (param.default)
            )
        except ParamError as exc:
            raise SpecError(str(exc)) from None
    mode = out.get("mode")
    for name, only in _MODE_ONLY.items():
        if kind == "impulse" and mode != only:
            if name in options:
                raise SpecError(f"{prefix}{name}: only used with mode = {only!r}, not {mode!r}")
            out.pop(name)
    return out


def _canonical(
    kind: Any, level: Any, apply_to: Any, options: Any, where: str = "", level_key: str = "level"
) -> tuple[str, float, str, tuple[tuple[str, Any], ...]]:
    """Validated, canonical ``(kind, level, apply_to, options)``; level 0 becomes CLEAN's."""
    prefix = _prefix(where)
    pairs = dict(options.items() if isinstance(options, Mapping) else options)
    if kind == CLEAN_KIND:
        level_value = _check_level(kind, level, {}, prefix + level_key)
        if level_value != 0 or pairs:
            raise SpecError(f"{prefix}kind: {CLEAN_KIND!r} takes level 0 and no options")
        return CLEAN_KIND, 0.0, "both", ()
    if kind not in NOISE_KINDS:
        kinds = ", ".join(NOISE_KINDS)
        raise SpecError(f"{prefix}kind: expected one of {kinds}, got {shown(kind)}")
    if apply_to not in APPLY_TO:
        raise SpecError(
            f"{prefix}apply_to: expected one of {', '.join(APPLY_TO)}, got {shown(apply_to)}"
        )
    checked = _check_options(kind, pairs, where)
    level_value = _check_level(kind, level, checked, prefix + level_key)
    if level_value == 0:
        return CLEAN_KIND, 0.0, "both", ()
    return kind, level_value, apply_to, tuple(sorted(checked.items()))


@dataclass(frozen=True)
class Perturbation:
    """One noise model at one level, applied to ``train``, ``test`` or ``both``.

    Construction validates and canonicalises: options are sorted and completed with their
    defaults, and level 0 of any kind becomes :data:`CLEAN`. Invalid values raise
    :class:`benchkit.errors.SpecError`.
    """

    kind: str
    level: float
    apply_to: str = "both"
    options: tuple[tuple[str, Any], ...] = ()

    def __post_init__(self) -> None:
        fields = _canonical(self.kind, self.level, self.apply_to, self.options)
        for name, value in zip(("kind", "level", "apply_to", "options"), fields, strict=True):
            object.__setattr__(self, name, value)

    @property
    def is_clean(self) -> bool:
        return self.kind == CLEAN_KIND

    def option(self, name: str) -> Any:
        """The value of option ``name`` (KeyError if the kind has no such option)."""
        return dict(self.options)[name]

    def key(self) -> str:
        """Canonical, stable text: ``kind:level:apply_to`` then ``:name=value,...`` if any."""
        if self.is_clean:
            return CLEAN_KIND
        text = f"{self.kind}:{format_number(self.level)}:{self.apply_to}"
        if self.options:
            text += ":" + ",".join(f"{k}={_fmt_value(v)}" for k, v in self.options)
        return text

    def as_dict(self) -> dict[str, Any]:
        """Plain data: ``kind``, ``level``, ``apply_to``, ``options`` (a dict) and ``key``."""
        return {
            "kind": self.kind,
            "level": self.level,
            "apply_to": self.apply_to,
            "options": dict(self.options),
            "key": self.key(),
        }


CLEAN = Perturbation(CLEAN_KIND, 0.0)


def make_perturbation(
    kind: str, level: float, apply_to: str = "both", **options: Any
) -> Perturbation:
    """A validated :class:`Perturbation`; any kind at level 0 gives :data:`CLEAN`."""
    return Perturbation(kind, level, apply_to, tuple(options.items()))


def perturbation_from_key(key: str) -> Perturbation:
    """Inverse of :meth:`Perturbation.key`; raises SpecError for text that is not a key."""
    if key == CLEAN_KIND:
        return CLEAN
    parts = key.split(":")
    if len(parts) not in (3, 4):
        raise SpecError(f"perturbation: not a perturbation key: {key!r}")
    kind, level_text, apply_to = parts[:3]
    if kind not in NOISE_KINDS:
        raise SpecError(f"perturbation: unknown noise kind in key {key!r}")
    schema = {p.name: p for p in _OPTIONS[kind]}
    options: dict[str, Any] = {}
    for item in parts[3].split(",") if len(parts) == 4 else ():
        name, sep, text = item.partition("=")
        if not sep or name not in schema:
            raise SpecError(f"perturbation: bad option {item!r} in key {key!r}")
        try:
            options[name] = schema[name].kind(text)
        except ValueError:
            raise SpecError(f"perturbation: bad option {item!r} in key {key!r}") from None
    try:
        level = float(level_text)
    except ValueError:
        raise SpecError(f"perturbation: bad level {level_text!r} in key {key!r}") from None
    return Perturbation(kind, level, apply_to, tuple(options.items()))


def _check_levels(levels: Any, where: str) -> list[int | float]:
    expected = "expected an increasing list of numbers >= 0"
    if not isinstance(levels, (list, tuple)) or not levels:
        raise SpecError(f"{where}: {expected}, got {shown(levels)}")
    for v in levels:
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0:
            raise SpecError(f"{where}: {expected}, got {list(levels)!r}")
    if any(b <= a for a, b in zip(levels[:-1], levels[1:], strict=True)):
        raise SpecError(f"{where}: {expected}, got {list(levels)!r}")
    return list(levels)


def parse_sweeps(tables: list[dict], where: str = "sweep") -> list[Perturbation]:
    """Validate ``[[sweep]]`` tables and expand them to perturbations.

    Parameters
    ----------
    tables : the parsed TOML array of tables; each has ``kind``, ``levels`` (increasing,
        >= 0), optional ``apply_to`` (default ``"both"``) and the kind's options.
    where : key path of the array, used in error messages (``sweep[1].levels: ...``).

    Returns
    -------
    The perturbations in spec order without repeats; every level 0 collapses into one
    :data:`CLEAN`.
    """
    if not isinstance(tables, list):
        raise SpecError(f"{where}: expected an array of tables ([[{where}]]), got {shown(tables)}")
    out: list[Perturbation] = []
    seen: set[Perturbation] = set()
    for i, table in enumerate(tables):
        path = f"{where}[{i}]"
        if not isinstance(table, dict):
            raise SpecError(f"{path}: expected a table, got {shown(table)}")
        for required in ("kind", "levels"):
            if required not in table:
                raise SpecError(f"{path}.{required}: missing (required)")
        kind = table["kind"]
        if kind not in NOISE_KINDS:
            kinds = ", ".join(NOISE_KINDS)
            raise SpecError(f"{path}.kind: expected one of {kinds}, got {shown(kind)}")
        levels = _check_levels(table["levels"], f"{path}.levels")
        options = {k: v for k, v in table.items() if k not in ("kind", "levels", "apply_to")}
        apply_to = table.get("apply_to", "both")
        for level in levels:
            fields = _canonical(kind, level, apply_to, options, path, level_key="levels")
            perturbation = Perturbation(*fields)
            if perturbation not in seen:
                seen.add(perturbation)
                out.append(perturbation)
    return out


# ---------------------------------------------------------------------------- applying noise


@dataclass(frozen=True)
class _TrainStats:
    std: np.ndarray
    mean: np.ndarray


def _stream_key(p: Perturbation) -> str:
    """The part of a perturbation that selects its draws: kind and options, not level/apply_to."""
    return p.kind + ":" + ",".join(f"{name}={value!r}" for name, value in p.options)


def _streams(seed: int, entity: str, key: str) -> tuple[np.random.Generator, np.random.Generator]:
    """Independent (train, test) generators for one cell's noise."""
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise ValueError(f"noise seed: expected an integer >= 0, got {seed!r}")
    digest = hashlib.sha256(f"{entity}\x1f{key}".encode()).digest()
    words = [int.from_bytes(digest[i : i + 4], "little") for i in range(0, 16, 4)]
    base = [int(seed), NOISE_TAG, *words]
    return (
        np.random.default_rng(np.random.SeedSequence([*base, 0])),
        np.random.default_rng(np.random.SeedSequence([*base, 1])),
    )


def _additive(x: np.ndarray, rng: np.random.Generator, p: Perturbation, ref: _TrainStats):
    return x + rng.standard_normal(x.shape) * (p.level * ref.std)


def _multiplicative(x: np.ndarray, rng: np.random.Generator, p: Perturbation, ref: _TrainStats):
    return x * (1.0 + p.level * rng.standard_normal(x.shape))


def _impulse(x: np.ndarray, rng: np.random.Generator, p: Perturbation, ref: _TrainStats):
    if p.option("mode") == "student-t":
        return x + rng.standard_t(p.option("df"), size=x.shape) * (p.level * ref.std)
    hits = rng.random(x.shape) < p.level
    signs = np.where(rng.random(x.shape) < 0.5, -1.0, 1.0)
    return x + hits * signs * (p.option("magnitude") * ref.std)


def missing_mask(
    shape: tuple[int, int], rate: float, gap_length: int, rng: np.random.Generator, scope: str
) -> np.ndarray:
    """Boolean mask of missing points: stretches of ``gap_length`` steps starting at ``rate``."""
    n, d = shape
    starts = rng.random((n, d if scope == "channel" else 1)) < rate
    if gap_length > 1:
        counts = np.cumsum(starts, axis=0, dtype=np.int64)
        lagged = np.zeros_like(counts)
        lagged[gap_length:] = counts[:-gap_length]
        starts = counts > lagged  # a start within the last gap_length steps
    return np.broadcast_to(starts, (n, d))


def _missing(x: np.ndarray, rng: np.random.Generator, p: Perturbation, ref: _TrainStats):
    mask = missing_mask(x.shape, p.level, p.option("gap_length"), rng, p.option("scope"))
    fill = p.option("fill")
    if fill == "zero":
        return np.where(mask, 0.0, x)
    if fill == "mean":
        return np.where(mask, ref.mean, x)
    n, d = x.shape
    last = np.where(mask, -1, np.arange(n)[:, None])
    np.maximum.accumulate(last, axis=0, out=last)
    carried = x[np.maximum(last, 0), np.arange(d)]
    return np.where(last >= 0, carried, ref.mean)


def _drift(x: np.ndarray, rng: np.random.Generator, p: Perturbation, ref: _TrainStats):
    n, d = x.shape
    u = rng.standard_normal(d)
    ramp = np.arange(n, dtype=np.float64) / max(n - 1, 1)
    return x * (1.0 + p.level * ramp[:, None] * u[None, :])


_APPLY = {
    "additive": _additive,
    "multiplicative": _multiplicative,
    "impulse": _impulse,
    "missing": _missing,
    "drift": _drift,
}


def _as_series(a: np.ndarray, what: str) -> np.ndarray:
    arr = np.array(a, dtype=np.float64, copy=True)
    if arr.ndim != 2:
        raise ValueError(
            f"{what}: expected a 2-D (n_steps, n_channels) array, got shape {arr.shape}"
        )
    return arr


def apply_perturbation(
    train: np.ndarray,
    test: np.ndarray,
    perturbation: Perturbation,
    seed: int,
    entity: str = "",
) -> tuple[np.ndarray, np.ndarray]:
    """Apply ``perturbation`` to the raw train and/or test series of one entity.

    Parameters
    ----------
    train, test : (n, d) raw series (before scaling); never modified.
    perturbation : what to apply; :data:`CLEAN` returns exact copies of the inputs.
    seed : the cell's seed (integer >= 0).
    entity : the entity name; it and the perturbation key select the noise stream.

    Returns
    -------
    New float64 ``(train, test)`` arrays; the part not named by ``apply_to`` is an exact copy.
    """
    train_out, test_out = _as_series(train, "train"), _as_series(test, "test")
    if train_out.shape[1] != test_out.shape[1]:
        raise ValueError(
            f"train has {train_out.shape[1]} channels but test has {test_out.shape[1]}"
        )
    if perturbation.is_clean:
        return train_out, test_out
    ref = _TrainStats(std=train_out.std(axis=0), mean=train_out.mean(axis=0))
    train_rng, test_rng = _streams(seed, entity, _stream_key(perturbation))
    apply = _APPLY[perturbation.kind]
    if perturbation.apply_to in ("train", "both"):
        train_out = apply(train_out, train_rng, perturbation, ref)
    if perturbation.apply_to in ("test", "both"):
        test_out = apply(test_out, test_rng, perturbation, ref)
    return train_out, test_out
