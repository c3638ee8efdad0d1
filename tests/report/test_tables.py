"""Comparison, timing and rank tables on small frames built here (numbers worked by hand)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
import scipy.stats

from benchkit.report import cautions
from benchkit.report.render import render_table
from benchkit.report.tables import (
    EXPECTED_HEADER,
    MARGIN_HEADER,
    comparison_table,
    rank_table,
    seed_summary,
    timing_table,
)

from .frames import frame, metric_rows

# f1 of detector A and of the random reference on two entities and two seeds.
F1 = {
    ("A", "e1", 0): 0.6, ("A", "e2", 0): 0.8, ("A", "e1", 1): 0.5, ("A", "e2", 1): 0.7,
    ("random", "e1", 0): 0.1, ("random", "e2", 0): 0.3, ("random", "e1", 1): 0.2,
    ("random", "e2", 1): 0.2,
}
PA = {k: v + 0.2 for k, v in F1.items()}
RANDOM_PA = {k: 0.55 for k in F1}


def _frame() -> pd.DataFrame:
    return frame(metric_rows(F1), metric_rows(PA, metric="pa_f1"),
                 metric_rows(RANDOM_PA, metric="random_pa_f1"),
                 metric_rows({k: 9.0 for k in F1}, threshold="pot"))


def test_seed_summary_is_mean_and_std_over_seeds_of_entity_averages():
    # worked by hand: A's per-seed entity averages are 0.7 (seed 0) and 0.6 (seed 1),
    # so mean 0.65 and sample std sqrt(2 * 0.05**2 / 1) = 0.070711
    s = seed_summary(_frame(), "f1", "oracle")
    assert s.loc["A", "mean"] == pytest.approx(0.65)
    assert s.loc["A", "std"] == pytest.approx(math.sqrt(2 * 0.05**2))
    assert s.loc["A", "n_seeds"] == 2 and s.loc["A", "n_entities"] == 2
    # reference: numpy's std with ddof=1 on the same per-seed averages
    assert s.loc["random", "std"] == pytest.approx(np.std([0.2, 0.2], ddof=1))


def test_seed_summary_ignores_other_thresholds_and_noisy_cells():
    f = pd.concat([_frame(), frame(metric_rows({("A", "e1", 0): 0.0}, perturbation="add:0.3",
                                               kind="additive", level=0.3))])
    assert seed_summary(f, "f1", "oracle").loc["A", "mean"] == pytest.approx(0.65)
    assert seed_summary(f, "f1", "pot").loc["A", "mean"] == pytest.approx(9.0)


def test_comparison_table_marks_best_and_shows_pa_inflation():
    t = comparison_table(_frame(), "oracle", columns=("f1", "pa_f1"))
    assert t.headers == ("detector", "f1", "pa_f1", MARGIN_HEADER, EXPECTED_HEADER)
    # random is the reference row, always last
    assert [r[0] for r in t.rows] == ["A", "random (reference)"]
    a, rnd = t.rows
    assert a[1].best and not rnd[1].best
    # margin by hand: A's pa_f1 mean 0.85 minus random's 0.4
    assert t.data.loc["A", "pa_margin"] == pytest.approx(0.45)
    assert a[3].text() == "+0.450"
    assert t.data.loc["A", "random_pa_f1"] == pytest.approx(0.55)
    assert cautions.ORACLE in t.notes and cautions.POINT_ADJUSTED in t.notes
    assert cautions.NO_GUARANTEE in t.notes


def test_comparison_table_without_random_says_so():
    f = _frame()
    t = comparison_table(f[f["variant"] != "random"], "pot", columns=("f1",))
    assert any("no 'random' reference" in n for n in t.notes)
    assert t.rows[0][2].text() == "n/a"
    assert cautions.ORACLE not in t.notes  # pot thresholds do not peek at labels


def test_delays_best_is_the_smallest():
    f = frame(metric_rows({("A", "e1", 0): 4.0, ("B", "e1", 0): 2.0}, metric="delay_mean"))
    t = comparison_table(f, "oracle", columns=("delay_mean",))
    assert {r[0]: r[1].best for r in t.rows} == {"A": False, "B": True}


def test_single_seed_shows_no_spread():
    f = frame(metric_rows({("A", "e1", 0): 0.5, ("A", "e2", 0): 0.7}))
    t = comparison_table(f, "oracle", columns=("f1",))
    assert t.rows[0][1].text() == "0.600"


def test_timing_table_means_ok_cells_and_counts_failures():
    cells = pd.DataFrame({
        "variant": ["A", "A", "A", "B"], "status": ["ok", "ok", "failed", "ok"],
        "fit_seconds": [1.0, 3.0, np.nan, 0.5], "score_seconds": [0.2, 0.4, np.nan, 0.1],
        "points_per_second": [1000.0, 3000.0, np.nan, 9000.0],
        "peak_memory_mb": [50.0, 70.0, np.nan, 20.0],
    })
    t = timing_table(cells)
    assert t.data.loc["A", "fit_seconds"] == pytest.approx(2.0)
    assert t.data.loc["A", "peak_memory_mb"] == pytest.approx(70.0)
    rows = {r[0]: r for r in t.rows}
    assert rows["A"][-1] == "2/3" and rows["B"][-1] == "1/1"
    assert rows["B"][1].best and not rows["A"][1].best  # fastest fit
    assert rows["B"][3].best  # highest points/s


def test_rank_table_matches_scipy_ranks_and_friedman():
    rng = np.random.default_rng(3)
    values = rng.random((6, 4))
    variants = ["A", "B", "C", "random"]
    f = frame(metric_rows({(v, f"e{i}", 0): values[i, j] for i in range(6)
                           for j, v in enumerate(variants)}))
    t = rank_table(f, "f1", "oracle")
    # reference: scipy.stats.rankdata on the negated values (1 = best), averaged over entities
    expected = scipy.stats.rankdata(-values, axis=1).mean(axis=0)
    got = t.data["average_rank"].reindex(variants).to_numpy()
    np.testing.assert_allclose(got, expected)
    # reference: scipy.stats.friedmanchisquare
    stat, p = scipy.stats.friedmanchisquare(*values.T)
    assert t.data.attrs["friedman"] == pytest.approx((stat, p))
    assert any(f"{stat:.3f}" in n for n in t.notes)


def test_rank_table_with_one_entity_explains_why_no_test():
    f = frame(metric_rows({("A", "e1", 0): 0.5, ("B", "e1", 0): 0.7}))
    t = rank_table(f, "f1", "oracle")
    assert math.isnan(t.data.attrs["cd"])
    assert any("need at least 2 detectors and 2 complete entities" in n for n in t.notes)
    assert "n/a" in render_table(t, "plain")
