"""Noise models: distributions against scipy.stats, determinism, level 0, spec validation.

Statistical checks use a fixed seed, so each is deterministic; the thresholds (p > 1e-3) are
common practice for seeded distribution tests, not from a published source.
"""

from __future__ import annotations

import hashlib
import inspect
import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from benchkit.errors import SpecError
from benchkit.noise import (
    APPLY_TO,
    CLEAN,
    NOISE_KINDS,
    Perturbation,
    apply_perturbation,
    make_perturbation,
    parse_sweeps,
    perturbation_from_key,
)

P_MIN = 1e-3  # common practice: reject a seeded sample only on strong evidence


def _series(n: int, scales, means, seed: int) -> np.ndarray:
    """Invented Gaussian series (sanity data only), one column per (scale, mean)."""
    rng = np.random.default_rng(seed)
    return np.asarray(means) + rng.standard_normal((n, len(scales))) * np.asarray(scales)


def _variance_p(sample: np.ndarray, sigma: float) -> float:
    """Two-sided chi-square test of the variance: (n-1) s^2 / sigma^2 ~ chi2(n-1)."""
    # reference: scipy.stats.chi2; the test is the textbook one-sample variance test
    n = sample.size
    statistic = (n - 1) * sample.var(ddof=1) / sigma**2
    return 2 * min(stats.chi2.cdf(statistic, n - 1), stats.chi2.sf(statistic, n - 1))


TRAIN = _series(20_000, [1.0, 5.0, 0.2], [10.0, -3.0, 0.0], seed=1)
TEST = _series(20_000, [3.0, 1.0, 2.0], [0.0, 7.0, 1.0], seed=2)  # other spread than train


def test_additive_noise_has_zero_mean_and_sigma_of_level_times_train_std():
    level = 0.3
    train, test = apply_perturbation(TRAIN, TEST, make_perturbation("additive", level), seed=4)
    sigma = level * TRAIN.std(axis=0)  # train std also sets the test noise
    for noise in (train - TRAIN, test - TEST):
        for c in range(noise.shape[1]):
            z = noise[:, c] / sigma[c]
            # reference: scipy.stats.ttest_1samp, kstest against N(0, 1), normaltest
            assert stats.ttest_1samp(z, 0.0).pvalue > P_MIN
            assert stats.kstest(z, "norm").pvalue > P_MIN
            assert stats.normaltest(z).pvalue > P_MIN
            assert _variance_p(noise[:, c], sigma[c]) > P_MIN


def test_additive_noise_with_the_wrong_sigma_is_rejected_by_the_same_checks():
    # guards the checks above: 10% too much spread must be detected at this sample size
    _, test = apply_perturbation(TRAIN, TEST, make_perturbation("additive", 0.3), seed=4)
    noise = test[:, 0] - TEST[:, 0]
    assert _variance_p(noise, 1.1 * 0.3 * TRAIN[:, 0].std()) < P_MIN


def test_multiplicative_noise_is_relative_gaussian_error():
    level = 0.1
    clean = np.random.default_rng(5).uniform(1.0, 50.0, size=(30_000, 2))  # invented, nonzero
    train, test = apply_perturbation(clean, clean, make_perturbation("multiplicative", level), 6)
    for noisy in (train, test):
        eps = (noisy / clean - 1.0).ravel()
        # reference: scipy.stats.kstest against N(0, level^2); chi-square on the variance
        assert stats.kstest(eps, "norm", args=(0.0, level)).pvalue > P_MIN
        assert _variance_p(eps, level) > P_MIN
        assert stats.ttest_1samp(eps, 0.0).pvalue > P_MIN
    # the absolute error grows with the signal: larger values, larger spread
    err = np.abs(train - clean)
    assert err[clean > 40].mean() > 5 * err[clean < 8].mean()


def test_student_t_impulses_follow_the_t_distribution_scaled_by_train_std():
    level, df = 0.2, 3.0
    p = make_perturbation("impulse", level, "test", mode="student-t", df=df)
    _, test = apply_perturbation(TRAIN, TEST, p, seed=7)
    z = (test - TEST) / (level * TRAIN.std(axis=0))
    for c in range(z.shape[1]):
        # reference: scipy.stats.t(df) via kstest
        assert stats.kstest(z[:, c], stats.t(df).cdf).pvalue > P_MIN
    assert stats.kstest(z[:, 0], "norm").pvalue < P_MIN  # heavier tails than Gaussian


def test_spikes_occur_at_the_rate_with_the_magnitude_and_random_sign():
    rate, magnitude = 0.02, 4.0
    p = make_perturbation("impulse", rate, "train", mode="spikes", magnitude=magnitude)
    train, _ = apply_perturbation(TRAIN, TEST, p, seed=8)
    delta = train - TRAIN
    hits = delta != 0
    # reference: scipy.stats.binomtest for the rate and for the sign balance
    assert stats.binomtest(int(hits.sum()), hits.size, rate).pvalue > P_MIN
    expected = magnitude * TRAIN.std(axis=0)
    np.testing.assert_allclose(np.abs(delta)[hits], np.broadcast_to(expected, delta.shape)[hits])
    assert stats.binomtest(int((delta > 0).sum()), int(hits.sum()), 0.5).pvalue > P_MIN


POSITIVE = np.random.default_rng(9).uniform(1.0, 2.0, size=(40_000, 3))  # invented, no zeros


def test_missing_isolated_dropouts_at_the_rate_with_zero_fill():
    rate = 0.05
    p = make_perturbation("missing", rate, "train", fill="zero")
    train, _ = apply_perturbation(POSITIVE, POSITIVE, p, seed=10)
    dropped = train == 0.0
    assert np.array_equal(train[~dropped], POSITIVE[~dropped])
    # reference: scipy.stats.binomtest (each point drops independently at gap_length 1)
    assert stats.binomtest(int(dropped.sum()), dropped.size, rate).pvalue > P_MIN


def _runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Starts and lengths of the True runs of a 1-D mask."""
    edges = np.diff(np.concatenate(([0], mask.astype(int), [0])))
    starts, ends = np.flatnonzero(edges == 1), np.flatnonzero(edges == -1)
    return starts, ends - starts


def test_missing_gaps_are_at_least_gap_length_and_cover_the_expected_share():
    rate, gap = 0.01, 6
    p = make_perturbation("missing", rate, "test", gap_length=gap, fill="zero")
    _, test = apply_perturbation(POSITIVE, POSITIVE, p, seed=11)
    dropped = test == 0.0
    n = dropped.shape[0]
    for c in range(dropped.shape[1]):
        starts, lengths = _runs(dropped[:, c])
        assert (lengths[starts + lengths < n] >= gap).all()
    # a point is missing when a stretch started in the gap_length steps up to it:
    # P = 1 - (1 - rate)^gap_length (derived by hand from the definition)
    expected = 1 - (1 - rate) ** gap
    # common practice: a normal bound, widened by gap_length for correlation within stretches
    tolerance = 5 * np.sqrt(expected * (1 - expected) * gap / dropped.size)
    assert abs(dropped.mean() - expected) < tolerance


def test_missing_forward_fill_matches_pandas_ffill_and_mean_before_first_value():
    p = make_perturbation("missing", 0.3, "both", gap_length=3, fill="ffill")
    clean = POSITIVE[:2000]
    train, test = apply_perturbation(clean, clean[::-1], p, seed=12)
    for noisy, original in ((train, clean), (test, clean[::-1])):
        holes = noisy != original  # continuous values: a carried value never equals the clean one
        assert holes.mean() > 0.3
        # reference: pandas.DataFrame.ffill, then the clean train mean where nothing precedes
        expected = pd.DataFrame(np.where(holes, np.nan, original)).ffill()
        expected = expected.fillna(pd.Series(clean.mean(axis=0))).to_numpy()
        np.testing.assert_array_equal(noisy, expected)
        assert np.isfinite(noisy).all()


def test_missing_mean_fill_and_row_scope():
    p = make_perturbation("missing", 0.2, "train", fill="mean", scope="row", gap_length=2)
    train, _ = apply_perturbation(POSITIVE, POSITIVE, p, seed=13)
    holes = train != POSITIVE
    assert (holes.all(axis=1) | ~holes.any(axis=1)).all()  # whole rows or nothing
    means = np.broadcast_to(POSITIVE.mean(axis=0), train.shape)
    np.testing.assert_array_equal(train[holes], means[holes])


def test_missing_at_a_high_rate_with_long_gaps_is_still_finite():
    p = make_perturbation("missing", 0.9, "both", gap_length=50)
    train, test = apply_perturbation(POSITIVE[:500], POSITIVE[:300], p, seed=14)
    assert np.isfinite(train).all() and np.isfinite(test).all()


def test_drift_gain_ramps_linearly_from_one_with_gaussian_per_channel_slope():
    level, n, d = 0.5, 40, 5000
    ones = np.ones((n, d))
    gain, _ = apply_perturbation(ones, ones, make_perturbation("drift", level, "train"), seed=15)
    np.testing.assert_array_equal(gain[0], 1.0)
    ramp = np.arange(n)[:, None] / (n - 1)
    u = (gain[-1] - 1.0) / level
    np.testing.assert_allclose(gain, 1.0 + level * ramp * u[None, :], rtol=0, atol=1e-12)
    # reference: scipy.stats.kstest of the per-channel slopes against N(0, 1)
    assert stats.kstest(u, "norm").pvalue > P_MIN


@pytest.mark.parametrize("kind", NOISE_KINDS)
def test_level_zero_is_clean_and_returns_exact_copies(kind):
    p = make_perturbation(kind, 0)
    assert p == CLEAN and p.key() == "none" and p.kind == "none"
    train, test = apply_perturbation(TRAIN, TEST, p, seed=3)
    assert np.array_equal(train, TRAIN) and np.array_equal(test, TEST)
    assert not np.shares_memory(train, TRAIN) and not np.shares_memory(test, TEST)


@pytest.mark.parametrize("kind", NOISE_KINDS)
@pytest.mark.parametrize("apply_to", APPLY_TO)
def test_inputs_untouched_and_only_the_named_part_changes(kind, apply_to):
    train_in, test_in = TRAIN[:500].copy(), TEST[:400].copy()
    p = make_perturbation(kind, 0.3, apply_to)
    train, test = apply_perturbation(train_in, test_in, p, seed=3, entity="m-1")
    assert np.array_equal(train_in, TRAIN[:500]) and np.array_equal(test_in, TEST[:400])
    assert np.array_equal(train, train_in) == (apply_to == "test")
    assert np.array_equal(test, test_in) == (apply_to == "train")
    assert train.dtype == np.float64 and test.shape == test_in.shape


def test_labels_are_no_argument_of_the_noise():
    assert "labels" not in inspect.signature(apply_perturbation).parameters


def test_same_seed_same_noise_and_streams_differ_by_seed_entity_part():
    p = make_perturbation("additive", 0.5)
    x = TRAIN[:1000]
    a = apply_perturbation(x, x, p, seed=21, entity="host-a")
    b = apply_perturbation(x, x, p, seed=21, entity="host-a")
    assert np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1])
    assert not np.array_equal(a[0], a[1])  # train and test have their own sub-streams
    other_seed = apply_perturbation(x, x, p, seed=22, entity="host-a")
    other_entity = apply_perturbation(x, x, p, seed=21, entity="host-b")
    assert not np.array_equal(a[0], other_seed[0]) and not np.array_equal(a[0], other_entity[0])
    # the detector draws from default_rng(seed); the noise must not replay that stream
    z = (a[0] - x) / (0.5 * x.std(axis=0))
    detector_draws = np.random.default_rng(21).standard_normal(x.shape)
    assert abs(np.corrcoef(z.ravel(), detector_draws.ravel())[0, 1]) < 0.05


def test_noise_does_not_depend_on_python_hash_salt():
    code = (
        "import hashlib, numpy as np\n"
        "from benchkit.noise import apply_perturbation, make_perturbation\n"
        "x = np.arange(60.0).reshape(20, 3)\n"
        "t, _ = apply_perturbation(x, x, make_perturbation('additive', 1.0), 5, 'node')\n"
        "print(hashlib.sha256(t.tobytes()).hexdigest())\n"
    )
    outputs = set()
    for salt in ("1", "2"):
        env = {**os.environ, "PYTHONHASHSEED": salt}
        run = subprocess.run(
            [sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True
        )
        outputs.add(run.stdout.strip())
    x = np.arange(60.0).reshape(20, 3)
    here, _ = apply_perturbation(x, x, make_perturbation("additive", 1.0), 5, "node")
    assert outputs == {hashlib.sha256(here.tobytes()).hexdigest()}


def test_keys_are_canonical_and_round_trip():
    p = make_perturbation("multiplicative", 0.1)
    assert p.key() == "multiplicative:0.1:both"
    spikes = make_perturbation("impulse", 0.05, "test", magnitude=4, mode="spikes")
    assert spikes.key() == "impulse:0.05:test:magnitude=4,mode=spikes"
    assert make_perturbation("impulse", 0.2).key() == "impulse:0.2:both:df=3,mode=student-t"
    # explicit defaults and option order do not change the perturbation
    assert make_perturbation("missing", 0.1, fill="ffill") == make_perturbation("missing", 0.1)
    assert Perturbation("impulse", 0.1, "both", (("mode", "spikes"), ("magnitude", 2.0))) == (
        make_perturbation("impulse", 0.1, mode="spikes", magnitude=2)
    )
    for q in (p, spikes, CLEAN, make_perturbation("missing", 0.25, "train", gap_length=7)):
        assert perturbation_from_key(q.key()) == q
    assert p.as_dict() == {
        "kind": "multiplicative", "level": 0.1, "apply_to": "both", "options": {},
        "key": "multiplicative:0.1:both",
    }  # fmt: skip


@pytest.mark.parametrize(
    ("tables", "message"),
    [
        ([{"kind": "additive", "levels": [0, 0.2, 0.1]}],
         "sweep[0].levels: expected an increasing list of numbers >= 0, got [0, 0.2, 0.1]"),
        ([{"kind": "additive", "levels": [0, 0.1]}, {"kind": "drift", "levels": [-0.1, 0.1]}],
         "sweep[1].levels: expected an increasing list of numbers >= 0, got [-0.1, 0.1]"),
        ([{"kind": "additive", "levels": []}],
         "sweep[0].levels: expected an increasing list of numbers >= 0, got []"),
        ([{"kind": "gaussian", "levels": [0.1]}],
         "sweep[0].kind: expected one of additive, multiplicative, impulse, missing, drift, "
         'got "gaussian"'),
        ([{"kind": "additive", "levels": [0.1], "apply_to": "all"}],
         'sweep[0].apply_to: expected one of train, test, both, got "all"'),
        ([{"levels": [0.1]}], "sweep[0].kind: missing (required)"),
        ([{"kind": "missing", "levels": [0.5, 1]}],
         "sweep[0].levels: a rate for kind 'missing' must be < 1, got 1"),
        ([{"kind": "impulse", "mode": "spikes", "levels": [0.5, 2]}],
         "sweep[0].levels: a rate for kind 'impulse' must be <= 1, got 2"),
        ([{"kind": "missing", "levels": [0.1], "gap_length": 0}],
         "sweep[0].gap_length: expected an integer >= 1, got 0"),
        ([{"kind": "additive", "levels": [0.1], "df": 3}],
         "sweep[0].df: unknown option of noise kind 'additive'; valid: (none)"),
        ([{"kind": "impulse", "levels": [0.1], "magnitude": 3}],
         "sweep[0].magnitude: only used with mode = 'spikes', not 'student-t'"),
        ("additive", 'sweep: expected an array of tables ([[sweep]]), got "additive"'),
    ],
)  # fmt: skip
def test_bad_sweep_tables_name_the_key_path(tables, message):
    with pytest.raises(SpecError) as info:
        parse_sweeps(tables)
    assert str(info.value) == message


def test_combined_sweeps_deduplicate_and_share_one_clean_run():
    tables = [
        {"kind": "multiplicative", "levels": [0, 0.05, 0.1], "apply_to": "both"},
        {"kind": "additive", "levels": [0, 0.1]},
        {"kind": "multiplicative", "levels": [0.1, 0.2]},
    ]
    keys = [p.key() for p in parse_sweeps(tables)]
    assert keys == [
        "none", "multiplicative:0.05:both", "multiplicative:0.1:both", "additive:0.1:both",
        "multiplicative:0.2:both",
    ]  # fmt: skip


def test_levels_of_one_sweep_scale_the_same_draws():
    # common random numbers (standard variance-reduction practice in simulation sweeps, no
    # single outside source): additive noise at level 0.4 is exactly twice that at 0.2, and the
    # train part is perturbed identically whether apply_to is "train" or "both"
    x = TRAIN[:500]
    low = apply_perturbation(x, x, make_perturbation("additive", 0.2), seed=3, entity="n")
    high = apply_perturbation(x, x, make_perturbation("additive", 0.4), seed=3, entity="n")
    np.testing.assert_allclose(high[0] - x, 2.0 * (low[0] - x), rtol=1e-12, atol=1e-12)
    train_only = apply_perturbation(
        x, x, make_perturbation("additive", 0.2, apply_to="train"), seed=3, entity="n"
    )
    assert np.array_equal(train_only[0], low[0]) and np.array_equal(train_only[1], x)
    # dropout masks nest: every point missing at rate 0.05 is also missing at rate 0.2
    few = missing_points(x, make_perturbation("missing", 0.05, fill="zero"))
    many = missing_points(x, make_perturbation("missing", 0.2, fill="zero"))
    assert few.any() and not (few & ~many).any()


def missing_points(x, p):
    shifted = x + 1000.0  # no true zeros, so a zero marks a filled gap
    noisy, _ = apply_perturbation(shifted, shifted, p, seed=3, entity="n")
    return noisy == 0.0
