"""The contract kit: an executable check that a detector honours the benchkit protocol.

:func:`check_detector` runs a battery of checks on small invented data (a seeded mixture of
sinusoids and noise) and raises :class:`ContractError` on any failure; :func:`run_checks` runs
the same battery and returns the :class:`CheckReport` without raising (the CLI prints it).

``quick=True`` (for slow models) skips the checks that need extra fits or long series
(``refit``, ``single-channel``, ``constant-channel``, ``speed``); causality and determinism
always run.

``persistence`` saves the fitted reference detector with ``save(path)``, reads it back with
``Cls.load(path)`` and requires bit-identical scores; a detector without ``save``/``load`` has
it skipped (``benchkit export-model`` refuses such a detector with a message saying so).
A detector that declares ``attributes = True`` has its ``attribute`` output checked like its
scores (``attribution`` check): shape ``(n, d)``, float64, warm-up rows :data:`WARMUP_SCORE`,
finite afterwards, causal and deterministic. Other detectors skip that check.
"""

from __future__ import annotations

import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from tabulate import tabulate

from benchkit.detector import WARMUP_SCORE, Detector, Param
from benchkit.persist import has_persistence

PASSED, FAILED, SKIPPED = "passed", "failed", "skipped"
SPEED_STEPS = 10_000
_NAN_WORDS = ("nan", "finite", "missing")


class ContractError(AssertionError):
    """A detector failed one or more contract checks; the message lists them."""


@dataclass(frozen=True)
class CheckResult:
    """Outcome of one check: ``status`` is ``passed``, ``failed`` or ``skipped``."""

    name: str
    status: str
    detail: str = ""
    seconds: float = 0.0


@dataclass
class CheckReport:
    """All check outcomes for one detector."""

    detector: str
    results: list[CheckResult] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        """True when no check failed (skipped checks do not fail)."""
        return not self.failures

    @property
    def failures(self) -> list[CheckResult]:
        return [r for r in self.results if r.status == FAILED]

    def status(self, name: str) -> str:
        """Status of the check called ``name``."""
        for r in self.results:
            if r.name == name:
                return r.status
        raise KeyError(name)

    def table(self) -> str:
        """A plain-text table of the checks, one row each, and a summary line."""
        rows = [(r.name, r.status, f"{r.seconds:.2f}", r.detail) for r in self.results]
        counts = {s: sum(r.status == s for r in self.results) for s in (PASSED, FAILED, SKIPPED)}
        summary = ", ".join(f"{n} {s}" for s, n in counts.items())
        body = tabulate(rows, headers=("check", "result", "seconds", "detail"), tablefmt="simple")
        return f"contract checks for {self.detector}\n{body}\n{summary}"


class _Fail(Exception):
    """Raised inside a check with the reason it failed."""


class _Skip(Exception):
    """Raised inside a check that does not apply to the detector, with the reason."""


def _require(condition: bool, message: str) -> None:
    if not condition:
        raise _Fail(message)


def make_check_data(n_steps: int, n_channels: int, seed: int) -> np.ndarray:
    """Invented, already scaled KPI-like data: shared sinusoids, per-channel gains, noise."""
    rng = np.random.default_rng(seed)
    t = np.arange(n_steps, dtype=np.float64)[:, None]
    latent = np.hstack([np.sin(2 * np.pi * t / 50.0), np.cos(2 * np.pi * t / 17.0)])
    gains = rng.normal(size=(2, n_channels))
    return latent @ gains + 0.3 * rng.normal(size=(n_steps, n_channels))


class _Context:
    """The detector under test, its data, and the lazily computed reference fit."""

    def __init__(self, cls: type[Detector], params: dict[str, Any], time_limit: float) -> None:
        self.cls, self.params, self.time_limit = cls, dict(params), time_limit
        warm = self.new().warmup
        self.n_train = max(400, 3 * (warm + 1) + 100)
        self.n_test = max(300, 2 * (warm + 1) + 100)
        self._train = make_check_data(self.n_train, 4, seed=11)
        self._test = make_check_data(self.n_test, 4, seed=12)
        self._reference: tuple[Detector, np.ndarray, Any] | None = None

    @property
    def train(self) -> np.ndarray:
        """A fresh copy of the training data (a detector that mutates it harms only its copy)."""
        return self._train.copy()

    @property
    def test(self) -> np.ndarray:
        """A fresh copy of the scored series."""
        return self._test.copy()

    def new(self) -> Detector:
        return self.cls(**self.params)

    def fit_score(self, train: np.ndarray, test: np.ndarray) -> tuple[Detector, np.ndarray]:
        det = self.new()
        det.fit(train)  # not chained: a fit that forgets to return self fails only its check
        return det, det.score(test)

    def reference(self) -> tuple[Detector, np.ndarray, Any]:
        """(instance, scores, fit return value) on writable copies of the data; computed once."""
        if self._reference is None:
            self.train_in, self.test_in = self.train, self.test
            det = self.new()
            returned = det.fit(self.train_in)
            self._reference = (det, det.score(self.test_in), returned)
        return self._reference


def _first_difference(a: np.ndarray, b: np.ndarray) -> int:
    same = (a == b) | (np.isnan(a) & np.isnan(b))
    return int(np.argmin(same))


def _check_output(scores: Any, n: int, warmup: int, what: str = "score") -> None:
    kind = type(scores).__name__
    _require(isinstance(scores, np.ndarray), f"{what} returned {kind}, not an ndarray")
    _require(scores.shape == (n,), f"{what} shape {scores.shape}, expected ({n},)")
    _require(scores.dtype == np.float64, f"{what} dtype {scores.dtype}, expected float64")
    _require(isinstance(warmup, int) and 0 <= warmup < n, f"warmup {warmup!r} not in [0, {n})")
    head, tail = scores[:warmup], scores[warmup:]
    _require(bool(np.all(head == WARMUP_SCORE)), "a warm-up step is not scored WARMUP_SCORE")
    bad = np.flatnonzero(~np.isfinite(tail))
    _require(bad.size == 0, f"non-finite score at step {warmup + bad[0]}" if bad.size else "")


# ---- the checks -------------------------------------------------------------------------


def _check_metadata(ctx: _Context) -> str:
    cls = ctx.cls
    _require(isinstance(cls.name, str) and bool(cls.name), "name is empty")
    desc = cls.description
    _require(isinstance(desc, str) and bool(desc) and "\n" not in desc,
             "description must be one non-empty line")
    _require(isinstance(cls.needs_torch, bool), "needs_torch is not a bool")
    _require(isinstance(cls.params, tuple), "params is not a tuple")
    names = [p.name for p in cls.params]
    _require(all(isinstance(p, Param) for p in cls.params), "params holds a non-Param")
    _require(len(set(names)) == len(names), "a hyperparameter is declared twice")
    for p in cls.params:
        try:
            p.validate(p.default)
        except ValueError as exc:
            raise _Fail(f"default of {p.name!r} fails its own declaration: {exc}") from None
    return f"{len(names)} hyperparameters"


def _alternative(p: Param) -> tuple[bool, Any]:
    """A valid value other than the default, if the declaration allows one."""
    if p.choices is not None:
        candidates = list(p.choices)
    elif p.kind is bool:
        candidates = [not p.default]
    elif p.kind in (int, float):
        ref = p.default if p.default is not None else (p.low if p.low is not None else 1)
        candidates = [ref, ref + 1, ref - 1, (ref + (p.low or 0)) / 2, p.low, p.high]
        candidates = [p.kind(c) for c in candidates if c is not None]
    elif p.kind is str:
        candidates = [(p.default or "") + "x"]
    else:
        candidates = []
    for value in candidates:
        if value == p.default:
            continue
        try:
            return True, p.validate(value)
        except ValueError:
            continue
    return False, None


def _check_params(ctx: _Context) -> str:
    declared = [p.name for p in ctx.cls.params]
    got = ctx.new().get_params()
    _require(sorted(got) == sorted(declared),
             f"get_params keys {sorted(got)} != declared {sorted(declared)}")
    for key, value in ctx.params.items():
        _require(got[key] is value or got[key] == value,
                 f"{key}: stored {got[key]!r}, given {value!r}")
    changed = {}
    for p in ctx.cls.params:
        ok, value = _alternative(p)
        if ok:
            changed[p.name] = value
    again = ctx.cls(**changed).get_params()
    for key, value in changed.items():
        _require(type(again[key]) is type(value) and again[key] == value,
                 f"{key}: stored {again[key]!r}, given {value!r}")
    clone = ctx.cls(**got).get_params()
    _require(clone == got, "rebuilding from get_params() gives different parameters")
    return f"{len(changed)} values round-tripped"


def _check_fit_returns_self(ctx: _Context) -> str:
    det, _, returned = ctx.reference()
    _require(returned is det, f"fit returned {type(returned).__name__}, not self")
    return ""


def _check_output_check(ctx: _Context) -> str:
    det, scores, _ = ctx.reference()
    _check_output(scores, ctx.n_test, det.warmup)
    return f"warmup {det.warmup}"


def _check_causality(ctx: _Context) -> str:
    det, scores, _ = ctx.reference()
    rng = np.random.default_rng(5)
    warm = det.warmup
    cuts = sorted({warm + 1, warm + (ctx.n_test - warm) // 2, ctx.n_test - 2})
    for cut in cuts:
        for kind in ("noise", "spike"):
            changed = ctx.test
            future = changed[cut:]
            if kind == "noise":
                future[:] = 3.0 + 5.0 * rng.normal(size=future.shape)
            else:
                future[0] += 50.0
            again = det.score(changed)
            same = np.array_equal(again[:cut], scores[:cut])
            if not same:
                step = _first_difference(again[:cut], scores[:cut])
                raise _Fail(f"changing steps >= {cut} ({kind}) changed the score at step {step}")
    return f"cuts at {', '.join(map(str, cuts))}"


def _check_determinism(ctx: _Context) -> str:
    det, scores, _ = ctx.reference()
    repeat = det.score(ctx.test)
    _require(np.array_equal(repeat, scores, equal_nan=True),
             "scoring the same series twice gave different scores")
    _, fresh = ctx.fit_score(ctx.train, ctx.test)
    _require(np.array_equal(fresh, scores, equal_nan=True),
             f"a second instance with the same parameters differs (first at step "
             f"{_first_difference(fresh, scores)})")
    return "same parameters, bit-identical scores"


def _check_attribution(ctx: _Context) -> str:
    if not getattr(ctx.cls, "attributes", False):
        raise _Skip("not declared (attributes = False)")
    det, _, _ = ctx.reference()
    n, d, warm = ctx.n_test, ctx._test.shape[1], det.warmup
    test = ctx.test
    values = det.attribute(test)
    kind = type(values).__name__
    _require(isinstance(values, np.ndarray), f"attribute returned {kind}, not an ndarray")
    _require(values.shape == (n, d), f"attribute shape {values.shape}, expected ({n}, {d})")
    _require(values.dtype == np.float64, f"attribute dtype {values.dtype}, expected float64")
    _require(bool(np.all(values[:warm] == WARMUP_SCORE)),
             "a warm-up row of attribute is not WARMUP_SCORE")
    bad = np.argwhere(~np.isfinite(values[warm:]))
    _require(bad.size == 0, f"non-finite attribution at step {warm + bad[0][0]}, channel "
             f"{bad[0][1]}" if bad.size else "")
    _require(np.array_equal(test, ctx._test), "attribute modified the series")
    _require(np.array_equal(det.attribute(ctx.test), values),
             "attributing the same series twice gave different values")
    fresh, _ = ctx.fit_score(ctx.train, ctx.test)
    _require(np.array_equal(fresh.attribute(ctx.test), values),
             "a second instance with the same parameters attributes differently")
    cut = warm + (n - warm) // 2
    changed = ctx.test
    changed[cut:] = 3.0 + 5.0 * np.random.default_rng(6).normal(size=changed[cut:].shape)
    again = det.attribute(changed)
    if not np.array_equal(again[:cut], values[:cut]):
        step = int(np.argmax(~np.all(again[:cut] == values[:cut], axis=1)))
        raise _Fail(f"changing steps >= {cut} changed the attribution at step {step}")
    return f"({n}, {d}), causal and deterministic"


def _check_refit(ctx: _Context) -> str:
    _, scores, _ = ctx.reference()
    det = ctx.new()
    det.fit(make_check_data(ctx.n_train, 4, seed=13) * 2.0 + 1.0)
    det.fit(ctx.train)
    again = det.score(ctx.test)
    _require(np.array_equal(again, scores, equal_nan=True),
             "fitting on other data first changed the result of the second fit")
    return ""


def _check_no_mutation(ctx: _Context) -> str:
    ctx.reference()
    _require(np.array_equal(ctx.train_in, ctx._train), "fit or score modified the train array")
    _require(np.array_equal(ctx.test_in, ctx._test), "score modified the scored series")
    return ""


def _check_single_channel(ctx: _Context) -> str:
    det, scores = ctx.fit_score(ctx.train[:, :1], ctx.test[:, :1])
    _check_output(scores, ctx.n_test, det.warmup)
    return "d = 1"


def _check_constant_channel(ctx: _Context) -> str:
    train, test = ctx.train, ctx.test
    train[:, 1] = 0.0
    test[:, 1] = 0.0
    test[ctx.n_test // 2 :, 1] = 1.0  # the constant channel moves to a new constant level
    det, scores = ctx.fit_score(train, test)
    _check_output(scores, ctx.n_test, det.warmup)
    return "channel 1 constant in train and test"


def _expect_value_error(action: Callable[[], Any], what: str) -> None:
    try:
        action()
    except ValueError as exc:
        text = str(exc).lower()
        _require(any(w in text for w in _NAN_WORDS),
                 f"{what}: ValueError without naming the problem: {exc}")
        return
    except Exception as exc:
        raise _Fail(f"{what}: raised {type(exc).__name__} instead of ValueError: {exc}") from None
    raise _Fail(f"{what}: accepted NaN input silently")


def _check_nan_refused(ctx: _Context) -> str:
    det, _, _ = ctx.reference()
    bad_train = ctx.train
    bad_train[ctx.n_train // 2, 0] = np.nan
    _expect_value_error(lambda: ctx.new().fit(bad_train), "fit")
    bad_test = ctx.test
    bad_test[ctx.n_test - 5, 2] = np.nan
    _expect_value_error(lambda: det.score(bad_test), "score")
    return "fit and score raise ValueError"


def _check_persistence(ctx: _Context) -> str:
    """``save(path)`` then ``Cls.load(path)`` scores the test series bit for bit the same."""
    if not has_persistence(ctx.cls):
        raise _Skip("no save(path)/load(path): benchkit export-model cannot bundle it")
    det, scores, _ = ctx.reference()
    with tempfile.TemporaryDirectory(prefix="benchkit-contract-") as tmp:
        path = Path(tmp) / "model"
        det.save(path)
        _require(path.is_file(), "save(path) wrote no file at path")
        loaded = ctx.cls.load(path)
        _require(isinstance(loaded, ctx.cls), f"load returned {type(loaded).__name__}")
        _require(loaded.get_params() == det.get_params(), "load changed the hyperparameters")
        again = loaded.score(ctx.test)
    _require(np.array_equal(again, scores, equal_nan=True),
             f"the loaded detector scores differently (first at step "
             f"{_first_difference(again, scores)})")
    return "save/load round trip, bit-identical scores"


def _check_speed(ctx: _Context) -> str:
    det, _, _ = ctx.reference()
    long = make_check_data(SPEED_STEPS, 4, seed=14)
    start = time.perf_counter()
    scores = det.score(long)
    seconds = time.perf_counter() - start
    _check_output(scores, SPEED_STEPS, det.warmup)
    _require(seconds <= ctx.time_limit,
             f"scoring {SPEED_STEPS} steps took {seconds:.2f} s (limit {ctx.time_limit:g} s)")
    return f"{SPEED_STEPS} steps in {seconds:.2f} s"


CHECKS: tuple[tuple[str, Callable[[_Context], str], bool], ...] = (
    # (name, check, runs in quick mode)
    ("metadata", _check_metadata, True),
    ("params-roundtrip", _check_params, True),
    ("fit-returns-self", _check_fit_returns_self, True),
    ("score-output", _check_output_check, True),
    ("causality", _check_causality, True),
    ("determinism", _check_determinism, True),
    ("attribution", _check_attribution, True),
    ("refit", _check_refit, False),
    ("no-mutation", _check_no_mutation, True),
    ("single-channel", _check_single_channel, False),
    ("constant-channel", _check_constant_channel, False),
    ("nan-refused", _check_nan_refused, True),
    ("persistence", _check_persistence, True),
    ("speed", _check_speed, False),
)
CHECK_NAMES: tuple[str, ...] = tuple(name for name, _, _ in CHECKS)


def _as_class(detector: type[Detector] | Detector) -> tuple[type[Detector], dict[str, Any]]:
    if isinstance(detector, Detector):
        return type(detector), detector.get_params()
    if isinstance(detector, type) and issubclass(detector, Detector):
        return detector, {p.name: p.default for p in detector.params}
    raise TypeError(f"expected a Detector subclass or instance, got {detector!r}")


def run_checks(
    detector: type[Detector] | Detector, quick: bool = False, time_limit: float = 10.0
) -> CheckReport:
    """Run every contract check on ``detector`` and return the report; never raises on failure.

    Parameters
    ----------
    detector : a :class:`Detector` subclass (checked with its defaults) or an instance (checked
        with its parameters, on fresh instances built from them).
    quick : skip the checks that need extra fits or a long series (causality and determinism
        always run).
    time_limit : seconds allowed to score a 10,000-step series.
    """
    cls, params = _as_class(detector)
    report = CheckReport(detector=cls.name or cls.__qualname__)
    try:
        ctx = _Context(cls, params, time_limit)
    except Exception as exc:
        msg = f"cannot build the detector: {type(exc).__name__}: {exc}"
        report.results = [CheckResult(name, FAILED, msg) for name in CHECK_NAMES]
        return report
    for name, check, in_quick in CHECKS:
        if quick and not in_quick:
            report.results.append(CheckResult(name, SKIPPED, "quick mode"))
            continue
        start = time.perf_counter()
        try:
            detail, status = check(ctx), PASSED
        except _Fail as exc:
            detail, status = str(exc), FAILED
        except _Skip as exc:
            detail, status = str(exc), SKIPPED
        except Exception as exc:  # a crash inside the detector fails this check only
            detail, status = f"raised {type(exc).__name__}: {exc}", FAILED
        seconds = time.perf_counter() - start
        report.results.append(CheckResult(name, status, detail, seconds))
    return report


def check_detector(
    detector: type[Detector] | Detector, quick: bool = False, time_limit: float = 10.0
) -> CheckReport:
    """Run the contract checks; raise :class:`ContractError` listing every failure.

    Returns the :class:`CheckReport` when all checks pass. Parameters as in :func:`run_checks`.
    """
    report = run_checks(detector, quick=quick, time_limit=time_limit)
    if not report.passed:
        lines = "; ".join(f"{r.name}: {r.detail}" for r in report.failures)
        raise ContractError(f"{report.detector} fails the detector contract: {lines}")
    return report


__all__ = [
    "CHECK_NAMES",
    "CheckReport",
    "CheckResult",
    "ContractError",
    "check_detector",
    "make_check_data",
    "run_checks",
]
