"""Ranks, Friedman, Nemenyi and the event bootstrap, against scipy, sklearn and Demšar (2006)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.metrics import f1_score

from benchkit.stats import (
    average_ranks,
    bootstrap_f1_ci,
    critical_difference,
    event_blocks,
    friedman_test,
    iman_davenport,
    nemenyi_q,
    rank_rows,
    tied_groups,
)


def _tied_table(seed: int, n: int, k: int) -> np.ndarray:
    """Invented scores on a coarse grid so that rows contain ties (sanity data only)."""
    return np.random.default_rng(seed).integers(0, 4, size=(n, k)) / 4.0


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_ranks_match_scipy_rankdata_with_ties(seed):
    table = _tied_table(seed, 15, 6)
    # reference: scipy.stats.rankdata (method "average"), rank 1 = best = largest value
    expected = stats.rankdata(-table, method="average", axis=1)
    np.testing.assert_array_equal(rank_rows(table), expected)
    lower = rank_rows(table, higher_is_better=False)
    np.testing.assert_array_equal(lower, stats.rankdata(table, axis=1))


def test_average_ranks_by_detector_and_rows_with_nan_left_out():
    table = pd.DataFrame(
        {"a": [0.9, 0.5, 0.7, np.nan], "b": [0.8, 0.5, 0.9, 0.1], "c": [0.1, 0.2, 0.3, 0.4]},
        index=["d1", "d2", "d3", "d4"],
    )
    # computed by hand: d1 ranks (1, 2, 3), d2 (1.5, 1.5, 3), d3 (2, 1, 3); d4 has a NaN
    expected = pd.Series({"a": 4.5 / 3, "b": 4.5 / 3, "c": 3.0}, name="average_rank")
    pd.testing.assert_series_equal(average_ranks(table), expected)
    lower = average_ranks(table, higher_is_better=False)
    np.testing.assert_allclose(lower.to_numpy(), [7.5 / 3, 7.5 / 3, 1.0])


@pytest.mark.parametrize(("seed", "n", "k"), [(0, 12, 5), (1, 30, 3), (2, 8, 10), (3, 20, 4)])
def test_friedman_matches_scipy(seed, n, k):
    table = _tied_table(seed, n, k)
    # reference: scipy.stats.friedmanchisquare (with its tie correction), one sample per detector
    expected = stats.friedmanchisquare(*table.T)
    statistic, p_value = friedman_test(table)
    assert statistic == pytest.approx(expected.statistic, rel=1e-12)
    assert p_value == pytest.approx(expected.pvalue, rel=1e-10)


def test_friedman_on_a_frame_drops_incomplete_rows_like_scipy_on_the_complete_ones():
    values = np.random.default_rng(4).random((10, 4))
    frame = pd.DataFrame(values, columns=list("abcd"))
    frame.iloc[3, 1] = np.nan
    expected = stats.friedmanchisquare(*np.delete(values, 3, axis=0).T)  # reference: scipy
    assert friedman_test(frame)[0] == pytest.approx(expected.statistic, rel=1e-12)


def test_friedman_all_ties_is_undefined():
    assert all(np.isnan(v) for v in friedman_test(np.ones((5, 3))))


def test_iman_davenport_matches_demsar_worked_example():
    # Demšar (2006), section 3.2.2: N = 14 data sets, k = 4, chi2_F = 9.28 gives F_F = 3.69
    # (values recalled from the paper, from memory); p from scipy.stats.f with (3, 39) df
    f_value, p_value = iman_davenport(9.28, 14, 4)
    assert f_value == pytest.approx(3.69, abs=0.01)
    assert p_value == pytest.approx(stats.f.sf(f_value, 3, 39), rel=1e-12)
    assert p_value < 0.05  # Demšar rejects the null hypothesis there


# Demšar (2006), Table 5: critical values q_alpha of the two-tailed Nemenyi test, k = 2..10
# (typed from memory of the published table; three decimals, so compared to within 1e-3)
DEMSAR_Q_005 = [1.960, 2.343, 2.569, 2.728, 2.850, 2.949, 3.031, 3.102, 3.164]
DEMSAR_Q_010 = [1.645, 2.052, 2.291, 2.459, 2.589, 2.693, 2.780, 2.855, 2.920]


@pytest.mark.parametrize(("alpha", "table"), [(0.05, DEMSAR_Q_005), (0.10, DEMSAR_Q_010)])
def test_nemenyi_q_equals_demsar_table(alpha, table):
    computed = [nemenyi_q(k, alpha) for k in range(2, 11)]
    np.testing.assert_allclose(computed, table, atol=1e-3, rtol=0)


@pytest.mark.parametrize("alpha", [0.05, 0.10, 0.01])
def test_nemenyi_q_for_two_detectors_is_the_normal_quantile(alpha):
    # the range of two standard normals over sqrt(2) is |N(0, 1)|: q = z_{1 - alpha/2}
    # (derived by hand; reference: scipy.stats.norm.ppf)
    assert nemenyi_q(2, alpha) == pytest.approx(stats.norm.ppf(1 - alpha / 2), abs=1e-6)


def test_critical_difference_matches_demsar_worked_example():
    # Demšar (2006), section 3.2.2: k = 4, N = 14 gives CD = 1.25 at 0.05 and 1.12 at 0.10
    # (from memory of the paper)
    assert critical_difference(4, 14, 0.05) == pytest.approx(1.25, abs=0.005)
    assert critical_difference(4, 14, 0.10) == pytest.approx(1.12, abs=0.005)
    # the formula itself, CD = q * sqrt(k (k + 1) / (6 N)), from the same paper
    assert critical_difference(7, 30) == pytest.approx(nemenyi_q(7) * np.sqrt(7 * 8 / 180))


@pytest.mark.parametrize("bad", [1, 0, 2.5])
def test_nemenyi_q_rejects_bad_k(bad):
    with pytest.raises(ValueError, match="k must be an integer >= 2"):
        nemenyi_q(bad)


def test_tied_groups_are_the_bars_of_a_cd_diagram():
    ranks = pd.Series({"a": 1.0, "b": 1.5, "c": 2.9, "d": 3.2})
    # worked by hand: groups are maximal runs whose rank spread is below CD (Demšar 2006)
    assert tied_groups(ranks, 1.0) == [("a", "b"), ("c", "d")]
    assert tied_groups(ranks, 2.0) == [("a", "b", "c"), ("b", "c", "d")]
    assert tied_groups(ranks, 0.2) == []
    assert tied_groups(ranks, 5.0) == [("a", "b", "c", "d")]


def _labelled_events(seed: int, n: int = 3000, count: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """Invented events and a noisy detector's predictions (sanity data only)."""
    rng = np.random.default_rng(seed)
    labels = np.zeros(n, dtype=np.int8)
    for start in rng.choice(n - 40, count, replace=False):
        labels[start : start + rng.integers(1, 30)] = 1
    pred = (rng.random(n) < 0.05) | ((labels == 1) & (rng.random(n) < 0.6))
    return pred, labels


def test_event_blocks_worked_example():
    labels = np.array([0, 1, 1, 0, 0, 1, 1, 1, 0, 1])
    pred = np.array([1, 0, 1, 0, 1, 0, 0, 0, 1, 1], dtype=bool)
    # by hand: blocks are [0..4] (event 1-2, FP at 0 and 4), [5..8] (event 5-7, FP at 8), [9]
    tp, fp, fn = event_blocks(pred, labels)
    assert (tp.tolist(), fp.tolist(), fn.tolist()) == ([1, 0, 1], [2, 1, 0], [1, 3, 0])
    tp, fp, fn = event_blocks(pred, labels, adjust="point")  # detected events count in full
    assert (tp.tolist(), fp.tolist(), fn.tolist()) == ([2, 0, 1], [2, 1, 0], [0, 3, 0])
    # PA%K at K = 50: 1 of 2 is not strictly above 50 %, so that event stays point-wise
    tp, _, fn = event_blocks(pred, labels, adjust="pa%k", k=50)
    assert (tp.tolist(), fn.tolist()) == ([1, 0, 1], [1, 3, 0])
    # delay-bounded: at delay 0 only an event's first step counts, at delay 1 its first two
    tp, _, fn = event_blocks(pred, labels, adjust="delay", delay=0)
    assert (tp.tolist(), fn.tolist()) == ([0, 0, 1], [2, 3, 0])
    tp, _, _ = event_blocks(pred, labels, adjust="delay", delay=1)
    assert tp.tolist() == [2, 0, 1]


def _hand_adjusted(pred: np.ndarray, labels: np.ndarray, k: float) -> np.ndarray:
    """PA%K written out event by event from the definition (Kim et al. 2022; K = 0 is PA,
    Xu et al. 2018): an event strictly more than K percent detected becomes wholly detected."""
    adjusted = pred.copy()
    edges = np.diff(np.concatenate(([0], labels, [0])))
    for start, end in zip(np.flatnonzero(edges == 1), np.flatnonzero(edges == -1), strict=True):
        if pred[start:end].sum() * 100 > k * (end - start):
            adjusted[start:end] = True
    return adjusted


def test_bootstrap_estimate_is_sklearn_f1_and_pa_estimate_is_hand_adjusted_f1():
    pred, labels = _labelled_events(1)
    ci = bootstrap_f1_ci(pred, labels, n_boot=200, seed=3)
    assert ci.estimate == pytest.approx(f1_score(labels, pred), rel=1e-12)  # reference: sklearn
    # reference: sklearn f1_score of the predictions adjusted by hand
    pa = bootstrap_f1_ci(pred, labels, n_boot=200, seed=3, adjust="point")
    assert pa.estimate == pytest.approx(f1_score(labels, _hand_adjusted(pred, labels, 0)))
    pak = bootstrap_f1_ci(pred, labels, n_boot=200, seed=3, adjust="pa%k", k=50)
    assert pak.estimate == pytest.approx(f1_score(labels, _hand_adjusted(pred, labels, 50)))
    assert ci.estimate < pak.estimate < pa.estimate
    assert ci.low <= ci.estimate <= ci.high and pa.low <= pa.estimate <= pa.high


@pytest.mark.parametrize(
    ("adjust", "options"), [("point", {}), ("pa%k", {"k": 20}), ("delay", {"delay": 3})]
)
def test_bootstrap_adjustments_agree_with_the_metrics_package(adjust, options):
    # internal consistency (not an outside reference): the same adjustment as
    # benchkit.metrics, scored by sklearn's f1_score
    from benchkit.metrics import delay_adjust, pa_k_adjust, point_adjust

    pred, labels = _labelled_events(4)
    adjusted = {
        "point": lambda: point_adjust(pred, labels),
        "pa%k": lambda: pa_k_adjust(pred, labels, options.get("k")),
        "delay": lambda: delay_adjust(pred, labels, options.get("delay")),
    }[adjust]()
    ci = bootstrap_f1_ci(pred, labels, n_boot=50, adjust=adjust, **options)
    assert ci.estimate == pytest.approx(f1_score(labels, adjusted), rel=1e-12)


def test_bootstrap_interval_equals_scipy_paired_percentile_bootstrap():
    pred, labels = _labelled_events(2)
    tp, fp, fn = event_blocks(pred, labels)

    def f1(tp, fp, fn, axis=-1):
        tp, fp, fn = tp.sum(axis), fp.sum(axis), fn.sum(axis)
        return 2 * tp / (2 * tp + fp + fn)

    # reference: scipy.stats.bootstrap, paired resampling of the event blocks, percentile
    # method, fed the same seeded Generator
    expected = stats.bootstrap(
        (tp, fp, fn), f1, paired=True, vectorized=True, n_resamples=1500, confidence_level=0.9,
        method="percentile", rng=np.random.default_rng(11),
    ).confidence_interval  # fmt: skip
    ci = bootstrap_f1_ci(pred, labels, n_boot=1500, level=0.9, seed=11)
    assert ci.low == pytest.approx(expected.low, rel=1e-12)
    assert ci.high == pytest.approx(expected.high, rel=1e-12)


def test_bootstrap_is_seeded_and_wider_at_higher_level():
    pred, labels = _labelled_events(3)
    first = bootstrap_f1_ci(pred, labels, seed=5)
    assert first == bootstrap_f1_ci(pred, labels, seed=5)
    assert first != bootstrap_f1_ci(pred, labels, seed=6)
    narrow = bootstrap_f1_ci(pred, labels, level=0.5, seed=5)
    assert first.low < narrow.low < narrow.high < first.high


def test_bootstrap_without_events_is_nan_and_bad_adjust_is_refused():
    assert all(np.isnan(bootstrap_f1_ci(np.ones(10, bool), np.zeros(10))))
    with pytest.raises(ValueError, match="adjust"):
        bootstrap_f1_ci(np.ones(10, bool), np.ones(10), adjust="pa")
    with pytest.raises(ValueError, match="k: expected a percentage"):
        bootstrap_f1_ci(np.ones(10, bool), np.ones(10), adjust="pa%k", k=150)
    with pytest.raises(ValueError, match="k: give k"):
        bootstrap_f1_ci(np.ones(10, bool), np.ones(10), adjust="pa%k")
