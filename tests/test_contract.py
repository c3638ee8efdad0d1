"""The contract kit: a correct reference detector passes, and each deliberately broken variant
fails the check written for its defect (and only the checks that defect touches).

The broken detectors below are one correct moving-mean detector with exactly one bug each.
The contract itself is benchkit's (docs/internals.md); these tests show that every check of the
kit can fail, so a pass means something.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

from benchkit.cli import main
from benchkit.detector import WARMUP_SCORE, Detector, Param, check_series
from benchkit.persist import SavesArrays
from benchkit.testing import (
    CHECK_NAMES,
    FAILED,
    PASSED,
    SKIPPED,
    ContractError,
    check_detector,
    run_checks,
)
from benchkit.windows import sliding_windows


class MovingMean(SavesArrays, Detector):
    """Correct reference: distance of each point to the mean of its causal window."""

    name = "test-moving-mean"
    description = "distance of the last point to its window mean"
    params = (
        Param("window", int, 5, "window", low=2),
        Param("gain", float, 1.0, "score multiplier", low=0.0),
        Param("seed", int, 0, "seed of a tiny jitter", low=0),
    )
    fitted_state = ("n_channels_", "spread_", "jitter_")

    def fit(self, train):
        train = check_series(train, "train")
        self.n_channels_ = train.shape[1]
        self.spread_ = np.maximum(train.std(axis=0), 1e-9)
        self.jitter_ = np.random.default_rng(self.seed).normal() * 1e-9
        return self

    def _values(self, series):
        means = sliding_windows(series, self.window).mean(axis=1)
        return np.abs(series[self.window - 1 :] - means) / self.spread_

    def score(self, series):
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape[0], WARMUP_SCORE)
        out[self.window - 1 :] = self.gain * self._values(series).sum(axis=1) + self.jitter_
        return out

    attributes = True

    def attribute(self, series):
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape, WARMUP_SCORE)
        out[self.window - 1 :] = self.gain * self._values(series)
        return out


class BadMetadata(MovingMean):
    params = (Param("window", int, 1, "below its own bound", low=2),) + MovingMean.params[1:]


class AltersParams(MovingMean):
    def __init__(self, **params):
        super().__init__(**params)
        self.gain = float(self.gain) * 2.0  # __init__ must store values unchanged


class FitReturnsNone(MovingMean):
    def fit(self, train):
        super().fit(train)


class Float32Scores(MovingMean):
    def score(self, series):
        return super().score(series).astype(np.float32)


class WarmupScoredZero(MovingMean):
    def score(self, series):
        out = super().score(series)
        out[: self.warmup] = 0.0
        return out


class NonCausal(MovingMean):
    def score(self, series):
        series = check_series(series, "series", self.n_channels_)
        out = super().score(series)
        out[self.window - 1 :] += np.abs(series.mean())  # uses every step, future included
        return out


class Unseeded(MovingMean):
    def fit(self, train):
        super().fit(train)
        self.jitter_ = np.random.default_rng().normal()  # not from self.seed
        return self


class LeaksAcrossFits(MovingMean):
    def fit(self, train):
        previous = getattr(self, "spread_", None)
        super().fit(train)
        if previous is not None:
            self.spread_ = (self.spread_ + previous) / 2.0  # remembers the previous fit
        return self


class MutatesInput(MovingMean):
    def score(self, series):
        series = check_series(series, "series", self.n_channels_)
        series -= 0.5  # in place, on the caller's array
        return super().score(series)


class NeedsTwoChannels(MovingMean):
    def fit(self, train):
        super().fit(train)
        self.pair_ = np.asarray(train)[:, 1]  # IndexError with one channel
        return self


class DividesByWindowStd(MovingMean):
    def score(self, series):
        series = check_series(series, "series", self.n_channels_)
        out = super().score(series)
        stds = sliding_windows(series, self.window).std(axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            out[self.window - 1 :] += (1.0 / stds).sum(axis=1) * 1e-9  # inf/NaN on flat windows
        return out


class FillsNaN(MovingMean):
    def fit(self, train):
        return super().fit(np.nan_to_num(np.asarray(train, dtype=np.float64)))

    def score(self, series):
        return super().score(np.nan_to_num(np.asarray(series, dtype=np.float64)))


class NaNTypeError(MovingMean):
    def fit(self, train):
        if np.isnan(np.asarray(train)).any():
            raise TypeError("bad input")
        return super().fit(train)

    def score(self, series):
        if np.isnan(np.asarray(series)).any():
            raise TypeError("bad input")
        return super().score(series)


class LosesJitterOnLoad(MovingMean):
    @classmethod
    def load(cls, path):
        det = super().load(path)
        det.jitter_ = 0.0  # a fitted attribute not restored
        return det


class NoPersistence(MovingMean):
    save = None  # a plug-in without save/load: the check is skipped, not failed
    load = None


class PerStepLoop(MovingMean):
    def score(self, series):
        series = check_series(series, "series", self.n_channels_)
        out = np.full(series.shape[0], WARMUP_SCORE)
        for t in range(self.window - 1, series.shape[0]):  # the slow way, on purpose
            window = series[t - self.window + 1 : t + 1]
            out[t] = float(np.abs(series[t] - window.mean(axis=0)).sum())
        return out


class AttributionPerStepOnly(MovingMean):
    def attribute(self, series):
        return super().attribute(series).sum(axis=1)  # (n,) instead of (n, d)


class AttributionPeeksAhead(MovingMean):
    def attribute(self, series):
        out = super().attribute(series)
        out[:-1] = np.where(np.isfinite(out[:-1]), out[:-1] + out[1:], out[:-1])
        return out


class AttributionUnseeded(MovingMean):
    def attribute(self, series):
        return super().attribute(series) + np.random.default_rng().random()


class AttributionWarmupZero(MovingMean):
    def attribute(self, series):
        out = super().attribute(series)
        out[: self.window - 1] = 0.0
        return out


# (broken class, the checks it must fail: exactly these, the rest pass)
BROKEN = [
    # load validates the stored parameters, and this default fails its own declaration
    (BadMetadata, {"metadata", "persistence"}),
    # load rebuilds from the stored parameters, so the alteration also breaks the round trip
    (AltersParams, {"params-roundtrip", "persistence"}),
    (FitReturnsNone, {"fit-returns-self"}),
    (Float32Scores, {"score-output", "single-channel", "constant-channel", "speed"}),
    (WarmupScoredZero, {"score-output", "single-channel", "constant-channel", "speed"}),
    (NonCausal, {"causality"}),
    (Unseeded, {"determinism", "refit"}),
    (LeaksAcrossFits, {"refit"}),
    (MutatesInput, {"no-mutation"}),
    (NeedsTwoChannels, {"single-channel"}),
    (DividesByWindowStd, {"constant-channel"}),
    (FillsNaN, {"nan-refused"}),
    (NaNTypeError, {"nan-refused"}),
    (LosesJitterOnLoad, {"persistence"}),
    (AttributionPerStepOnly, {"attribution"}),
    (AttributionPeeksAhead, {"attribution"}),
    (AttributionUnseeded, {"attribution"}),
    (AttributionWarmupZero, {"attribution"}),
]


def test_reference_detector_passes_every_check():
    report = check_detector(MovingMean)
    assert [r.name for r in report.results] == list(CHECK_NAMES)
    assert all(r.status == PASSED for r in report.results), report.table()


@pytest.mark.parametrize("cls, expected", BROKEN, ids=[c.__name__ for c, _ in BROKEN])
def test_each_defect_fails_its_own_check(cls, expected):
    report = run_checks(cls)
    failed = {r.name for r in report.failures}
    assert failed == expected, report.table()


def test_every_check_is_shown_to_fail_by_some_broken_detector():
    covered = set().union(*(expected for _, expected in BROKEN)) | {"speed"}
    assert covered == set(CHECK_NAMES)


def test_speed_check_fails_a_per_step_loop_but_not_the_vectorised_reference():
    # the limit is tight on purpose: a vectorised 10,000-step score takes well under 20 ms
    limit = 0.02
    assert run_checks(MovingMean, time_limit=limit).status("speed") == PASSED
    slow = run_checks(PerStepLoop, time_limit=limit)
    assert slow.status("speed") == FAILED
    assert "took" in next(r.detail for r in slow.results if r.name == "speed")


def test_check_detector_raises_contract_error_naming_the_check():
    with pytest.raises(ContractError, match="causality: changing steps >= "):
        check_detector(NonCausal)


def test_instances_are_checked_with_their_own_parameters():
    report = check_detector(MovingMean(window=9, gain=2.5))
    detail = next(r.detail for r in report.results if r.name == "score-output")
    assert detail == "warmup 8"
    with pytest.raises(ContractError, match="params-roundtrip"):
        check_detector(AltersParams(gain=3.0))


def test_quick_mode_skips_the_extra_fits_but_keeps_causality_and_determinism():
    report = run_checks(NonCausal, quick=True)
    skipped = {r.name for r in report.results if r.status == SKIPPED}
    assert skipped == {"refit", "single-channel", "constant-channel", "speed"}
    assert report.status("causality") == FAILED
    assert run_checks(Unseeded, quick=True).status("determinism") == FAILED


def test_a_detector_without_save_and_load_has_persistence_skipped_with_the_reason():
    report = run_checks(NoPersistence)
    assert report.status("persistence") == SKIPPED
    detail = next(r.detail for r in report.results if r.name == "persistence")
    assert "export-model" in detail and "save" in detail
    assert report.passed


def test_attribution_is_skipped_when_not_declared_and_failures_say_why():
    class NoAttribution(MovingMean):
        attributes = False

    assert run_checks(NoAttribution).status("attribution") == SKIPPED
    detail = next(r.detail for r in run_checks(AttributionPeeksAhead).results
                  if r.name == "attribution")
    assert "changed the attribution at step" in detail
    shape = next(r.detail for r in run_checks(AttributionPerStepOnly).results
                 if r.name == "attribution")
    assert "shape" in shape


def test_a_detector_that_cannot_be_built_fails_every_check():
    class Exploding(MovingMean):
        def __init__(self, **params):
            raise RuntimeError("boom")

    report = run_checks(Exploding)
    assert {r.status for r in report.results} == {FAILED}
    assert "RuntimeError: boom" in report.results[0].detail


def test_the_kit_is_fast_on_the_reference():
    start = time.perf_counter()
    run_checks(MovingMean)
    assert time.perf_counter() - start < 5.0  # common practice: a contract run is interactive


def test_cli_check_detector_prints_table_and_exit_status(capsys):
    assert main(["check-detector", "test_contract:MovingMean"]) == 0
    out = capsys.readouterr().out
    assert "causality" in out and "14 passed, 0 failed, 0 skipped" in out
    assert main(["check-detector", "test_contract:NonCausal", "--quick"]) == 1
    out = capsys.readouterr().out
    assert "failed" in out and "4 skipped" in out


def test_cli_check_detector_bad_input_is_one_line_and_exit_2(capsys):
    assert main(["check-detector", "test_contract:MovingMean", "--param", "window=1"]) == 2
    err = capsys.readouterr().err.strip()
    assert err == (
        "benchkit: error: test_contract:MovingMean.window: expected an integer >= 2, got 1"
    )
    assert main(["check-detector", "test_contract:MovingMean", "--param", "window"]) == 2
    assert "expected KEY=VALUE" in capsys.readouterr().err
    assert main(["check-detector", "test_contract:Missing"]) == 2
    assert "cannot load detector 'test_contract:Missing'" in capsys.readouterr().err
