"""Comparing detectors across datasets or entities: ranks, Friedman, Nemenyi CD, bootstrap.

The rank statistics follow Demšar, "Statistical comparisons of classifiers over multiple data
sets", JMLR 7 (2006): rank the k detectors on each of the N datasets (1 = best, ties share the
average rank), test whether the average ranks differ (Friedman), and call two detectors
different when their average ranks differ by at least the critical difference
``CD = q_alpha * sqrt(k (k + 1) / (6 N))`` (Nemenyi).
"""

from __future__ import annotations

from functools import lru_cache
from typing import NamedTuple

import numpy as np
import pandas as pd
from scipy import stats as _dist


def _complete_rows(table: pd.DataFrame | np.ndarray) -> tuple[np.ndarray, list]:
    """The (N, k) float matrix of rows without NaN, and the column labels."""
    if isinstance(table, pd.DataFrame):
        columns = list(table.columns)
        values = table.to_numpy(dtype=np.float64)
    else:
        values = np.asarray(table, dtype=np.float64)
        if values.ndim != 2:
            raise ValueError(f"expected a 2-D table (rows x detectors), got shape {values.shape}")
        columns = list(range(values.shape[1]))
    return values[~np.isnan(values).any(axis=1)], columns


def _rank_and_ties(values: np.ndarray, higher_is_better: bool) -> tuple[np.ndarray, np.ndarray]:
    """Per-row ranks (1 = best, ties averaged) and, per cell, the size of its tie group."""
    x = -values if higher_is_better else values
    below = (x[:, None, :] < x[:, :, None]).sum(axis=2)
    tied = (x[:, None, :] == x[:, :, None]).sum(axis=2)
    return below + (tied + 1) / 2.0, tied


def rank_rows(table: pd.DataFrame | np.ndarray, higher_is_better: bool = True) -> np.ndarray:
    """Ranks within each row (1 = best; ties get the average of the ranks they span).

    Rows with a NaN are dropped (the rank tests need complete blocks).
    """
    values, _ = _complete_rows(table)
    return _rank_and_ties(values, higher_is_better)[0]


def average_ranks(table: pd.DataFrame | np.ndarray, higher_is_better: bool = True) -> pd.Series:
    """Average rank of each detector over the rows.

    Parameters
    ----------
    table : rows = datasets or entities, columns = detectors, values = one metric. Rows with
        a NaN are left out.
    higher_is_better : whether a larger metric value is better (F1: yes; delay: no).

    Returns
    -------
    Series indexed by detector, named ``average_rank`` (1 = best possible).
    """
    values, columns = _complete_rows(table)
    ranks = _rank_and_ties(values, higher_is_better)[0]
    mean = ranks.mean(axis=0) if len(ranks) else np.full(len(columns), np.nan)
    return pd.Series(mean, index=columns, name="average_rank")


def friedman_test(table: pd.DataFrame | np.ndarray) -> tuple[float, float]:
    """Friedman's chi-square test that all detectors have the same average rank.

    ``chi2_F = (12 / (N k (k + 1)) * sum_j R_j^2 - 3 N (k + 1)) / C`` with ``R_j`` the rank sum
    of detector j over the N complete rows and the tie correction
    ``C = 1 - sum(t^3 - t) / (N k (k^2 - 1))`` over every group of t tied values in a row.
    The p-value is the upper tail of chi-square with k - 1 degrees of freedom.

    Returns
    -------
    ``(statistic, p_value)``; both NaN when every row is one big tie.
    """
    values, _ = _complete_rows(table)
    n, k = values.shape
    if k < 2 or n < 2:
        raise ValueError(f"the Friedman test needs >= 2 detectors and >= 2 rows, got {k} and {n}")
    ranks, tied = _rank_and_ties(values, higher_is_better=True)
    rank_sums = ranks.sum(axis=0)
    # a group of t tied values contributes t cells of (t^2 - 1) each, i.e. t^3 - t
    correction = 1.0 - (tied.astype(np.float64) ** 2 - 1.0).sum() / (n * k * (k * k - 1.0))
    if correction <= 0:
        return float("nan"), float("nan")
    raw = 12.0 / (n * k * (k + 1.0)) * float(rank_sums @ rank_sums) - 3.0 * n * (k + 1.0)
    statistic = raw / correction
    return float(statistic), float(_dist.chi2.sf(statistic, k - 1))


def iman_davenport(statistic: float, n: int, k: int) -> tuple[float, float]:
    """Iman and Davenport's F form of the Friedman statistic (Demšar 2006, section 3.2.2).

    ``F_F = (N - 1) chi2_F / (N (k - 1) - chi2_F)``, F-distributed with ``k - 1`` and
    ``(k - 1)(N - 1)`` degrees of freedom. Returns ``(F_F, p_value)``.
    """
    denominator = n * (k - 1.0) - statistic
    if denominator <= 0:
        return float("inf"), 0.0
    f_value = (n - 1.0) * statistic / denominator
    return float(f_value), float(_dist.f.sf(f_value, k - 1, (k - 1) * (n - 1)))


@lru_cache(maxsize=256)
def nemenyi_q(k: int, alpha: float = 0.05) -> float:
    """Critical value q_alpha of the Nemenyi test for ``k`` detectors.

    ``q_alpha = Q(1 - alpha; k, inf) / sqrt(2)`` with Q the studentized range quantile; these
    are the values tabulated by Demšar (2006, Table 5) for k = 2..10.
    """
    if isinstance(k, bool) or int(k) != k or k < 2:
        raise ValueError(f"nemenyi_q: k must be an integer >= 2, got {k!r}")
    if not 0 < alpha < 1:
        raise ValueError(f"nemenyi_q: alpha must lie in (0, 1), got {alpha!r}")
    return float(_dist.studentized_range.ppf(1.0 - alpha, int(k), np.inf) / np.sqrt(2.0))


def critical_difference(k: int, n: int, alpha: float = 0.05) -> float:
    """Nemenyi critical difference ``CD = q_alpha * sqrt(k (k + 1) / (6 N))``.

    Two of ``k`` detectors compared over ``n`` datasets differ significantly at level
    ``alpha`` when their average ranks differ by at least CD.
    """
    if n < 1:
        raise ValueError(f"critical_difference: n must be >= 1, got {n!r}")
    return nemenyi_q(k, alpha) * float(np.sqrt(k * (k + 1.0) / (6.0 * n)))


def tied_groups(ranks: pd.Series, cd: float) -> list[tuple]:
    """Maximal runs of detectors (in rank order) whose average ranks lie within ``cd``.

    These are the bars of a critical-difference diagram: detectors joined by one bar are not
    significantly different. Runs of a single detector are left out.
    """
    ordered = ranks.dropna().sort_values(kind="stable")
    values = ordered.to_numpy()
    labels = list(ordered.index)
    # for each start, the last index whose rank is within cd of it
    ends = np.searchsorted(values, values + cd, side="left") - 1
    ends = np.maximum(ends, np.arange(len(values)))
    groups = []
    reach = -1
    for start, end in enumerate(ends):  # one pass over detectors, not over time steps
        if end > reach and end > start:
            groups.append(tuple(labels[start : end + 1]))
        reach = max(reach, end)
    return groups


# --------------------------------------------------------------------------- bootstrap


class BootstrapCI(NamedTuple):
    """A point estimate with a percentile bootstrap interval."""

    estimate: float
    low: float
    high: float


ADJUSTMENTS = (None, "point", "pa%k", "delay")  # the names benchkit.metrics uses


def _check_adjust(adjust: str | None, k: float | None, delay: int | None) -> None:
    if adjust not in ADJUSTMENTS:
        raise ValueError(f"adjust: expected one of {ADJUSTMENTS}, got {adjust!r}")
    if (adjust == "pa%k") != (k is not None):
        raise ValueError("k: give k (percent, 0 to 100) exactly when adjust='pa%k'")
    if k is not None and not 0 <= k <= 100:
        raise ValueError(f"k: expected a percentage in [0, 100], got {k!r}")
    if (adjust == "delay") != (delay is not None):
        raise ValueError("delay: give delay (steps, >= 0) exactly when adjust='delay'")
    if delay is not None and (int(delay) != delay or delay < 0):
        raise ValueError(f"delay: expected an integer >= 0, got {delay!r}")


def event_blocks(
    pred: np.ndarray,
    labels: np.ndarray,
    adjust: str | None = None,
    k: float | None = None,
    delay: int | None = None,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """True positives, false positives and false negatives per event block.

    Block i holds event i (a maximal run of label 1) and the normal steps after it up to the
    next event; the normal steps before the first event join block 0.

    Parameters
    ----------
    pred : (n,) boolean predictions; labels : (n,) 0/1 labels.
    adjust : ``None`` (point-wise); ``"point"`` (point adjustment, Xu et al. 2018: an event
        with any detection counts in full); ``"pa%k"`` (Kim et al. 2022: in full when strictly
        more than ``k`` percent of it is detected, else point-wise); ``"delay"`` (in full when
        detected within its first ``delay + 1`` steps, else not at all).

    Returns
    -------
    ``(tp, fp, fn)``, one entry per event, int64.
    """
    _check_adjust(adjust, k, delay)
    p = np.asarray(pred).astype(bool).ravel()
    y = np.asarray(labels).astype(bool).ravel()
    if p.shape != y.shape:
        raise ValueError(f"pred has {p.size} steps but labels has {y.size}")
    is_start = y & ~np.concatenate(([False], y[:-1]))
    m = int(is_start.sum())
    if m == 0:
        empty = np.zeros(0, dtype=np.int64)
        return empty, empty, empty
    block = np.maximum(np.cumsum(is_start) - 1, 0)

    def per_block(values: np.ndarray) -> np.ndarray:
        return np.bincount(block, weights=values, minlength=m).astype(np.int64)

    hits, length, fp = per_block(p & y), per_block(y), per_block(p & ~y)
    if adjust == "point":
        hits = np.where(hits > 0, length, hits)
    elif adjust == "pa%k":
        hits = np.where(hits * 100.0 > k * length, length, hits)
    elif adjust == "delay":
        offset = np.arange(y.size) - np.flatnonzero(is_start)[block]
        caught = per_block(p & y & (offset <= delay)) > 0
        hits = np.where(caught, length, 0)
    return hits, fp, length - hits


def _f1(tp: np.ndarray, fp: np.ndarray, fn: np.ndarray) -> np.ndarray:
    denominator = 2.0 * tp + fp + fn
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(denominator > 0, 2.0 * tp / np.where(denominator > 0, denominator, 1), 0.0)


def bootstrap_f1_ci(
    pred: np.ndarray,
    labels: np.ndarray,
    n_boot: int = 1000,
    level: float = 0.95,
    seed: int = 0,
    adjust: str | None = None,
    k: float | None = None,
    delay: int | None = None,
) -> BootstrapCI:
    """Percentile bootstrap interval for F1, resampling events with their normal stretches.

    The test series is cut into event blocks (see :func:`event_blocks`); each replicate draws
    as many blocks as there are events, with replacement, from ``default_rng(seed)``, and
    computes F1 from the summed counts. All replicates are drawn in one array operation.

    Parameters
    ----------
    pred : (n,) boolean predictions; labels : (n,) 0/1 labels.
    n_boot : number of replicates; level : coverage of the interval.
    seed : seed of the resampling Generator.
    adjust, k, delay : the adjustment, as in :func:`event_blocks` and ``benchkit.metrics``.

    Returns
    -------
    :class:`BootstrapCI` ``(estimate, low, high)``; all NaN when the labels hold no event.
    """
    if n_boot < 1:
        raise ValueError(f"n_boot must be >= 1, got {n_boot!r}")
    if not 0 < level < 1:
        raise ValueError(f"level must lie in (0, 1), got {level!r}")
    tp, fp, fn = event_blocks(pred, labels, adjust, k, delay)
    if tp.size == 0:
        return BootstrapCI(float("nan"), float("nan"), float("nan"))
    estimate = float(_f1(tp.sum(), fp.sum(), fn.sum()))
    rng = np.random.default_rng(seed)
    picks = rng.integers(0, tp.size, (n_boot, tp.size))
    replicates = _f1(tp[picks].sum(axis=1), fp[picks].sum(axis=1), fn[picks].sum(axis=1))
    tail = (1.0 - level) / 2.0
    low, high = np.quantile(replicates, [tail, 1.0 - tail])
    return BootstrapCI(estimate, float(low), float(high))
