"""Sweep summaries: robustness index against numpy's trapezoid, summary tables on a hand-built
long frame, and the demo check that noise lowers a classical detector's score."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from benchkit.errors import SpecError
from benchkit.sweep import robustness_index, sweep_curves, sweep_summary


def test_robustness_index_equals_numpy_trapezoid_on_unequal_spacing():
    levels = [0.0, 0.05, 0.1, 0.2, 0.4]
    values = [0.9, 0.85, 0.8, 0.6, 0.3]
    # reference: numpy.trapezoid for the area, divided by value at 0 times the level range
    expected = np.trapezoid(values, levels) / (0.9 * 0.4)
    assert robustness_index(levels, values) == pytest.approx(expected, rel=1e-12)
    # by hand: 0.05*0.875 + 0.05*0.825 + 0.1*0.7 + 0.2*0.45 = 0.245; 0.245 / 0.36
    assert robustness_index(levels, values) == pytest.approx(0.245 / 0.36, rel=1e-12)


def test_robustness_index_flat_is_one_and_linear_to_zero_is_one_half():
    # worked by hand: no loss gives 1, a straight line down to 0 gives a triangle, 1/2
    assert robustness_index([0, 0.1, 0.3], [0.7, 0.7, 0.7]) == pytest.approx(1.0)
    assert robustness_index([0, 0.25, 1.0], [0.8, 0.6, 0.0]) == pytest.approx(0.5)


def test_robustness_index_undefined_cases():
    assert np.isnan(robustness_index([0, 0.1], [0.0, 0.2]))  # nothing to lose at level 0
    assert np.isnan(robustness_index([0], [0.5]))
    assert np.isnan(robustness_index([0, 0.1], [0.5, np.nan]))
    with pytest.raises(ValueError, match="strictly increasing"):
        robustness_index([0, 0.2, 0.1], [1, 1, 1])


# Invented results (sanity data): (variant, noise kind, apply_to, level) -> values over
# (entity, seed) pairs; the clean run is ("none", "both", 0).
CELLS = {
    ("pca", "none", "both", 0.0): [0.80, 0.90, 0.70, 0.84],
    ("pca", "additive", "both", 0.1): [0.70, 0.74, 0.66, 0.70],
    ("pca", "additive", "both", 0.4): [0.40, 0.42, 0.38, 0.40],
    ("pca", "multiplicative", "test", 0.2): [0.80, 0.80, 0.80, 0.80],
    ("iforest", "none", "both", 0.0): [0.60, 0.62, 0.58, 0.60],
    ("iforest", "additive", "both", 0.1): [0.60, 0.60, 0.56, 0.64],
    ("iforest", "additive", "both", 0.4): [0.50, 0.52, 0.50, 0.48],
    ("iforest", "multiplicative", "test", 0.2): [0.30, 0.30, 0.30, 0.30],
}


def _frame() -> pd.DataFrame:
    rows = []
    for (variant, kind, apply_to, level), values in CELLS.items():
        for i, value in enumerate(values):
            base = {"variant": variant, "detector": variant, "dataset": "demo",
                    "entity": f"e{i // 2}", "seed": i % 2, "noise_kind": kind,
                    "noise_level": level, "noise_apply": apply_to}  # fmt: skip
            rows.append({**base, "threshold": "oracle", "metric": "pa_f1", "value": value})
            rows.append({**base, "threshold": "pot", "metric": "pa_f1", "value": value / 2})
            rows.append({**base, "threshold": "none", "metric": "roc_auc", "value": 1 - value})
    return pd.DataFrame(rows)


def _mean(variant, kind, apply_to, level):
    return float(np.mean(CELLS[(variant, kind, apply_to, level)]))


def test_summary_means_drop_index_and_ranks():
    table = sweep_summary(_frame(), "pa_f1").set_index(["variant", "kind", "apply_to"])
    row = table.loc[("pca", "additive", "both")]
    levels, means = [0.0, 0.1, 0.4], [_mean("pca", "none", "both", 0.0)]
    means += [_mean("pca", "additive", "both", v) for v in levels[1:]]
    assert [row["mean@0"], row["mean@0.1"], row["mean@0.4"]] == pytest.approx(means)
    assert row["relative_drop"] == pytest.approx((means[0] - means[2]) / means[0])
    # reference: numpy.trapezoid on the mean curve
    expected_ri = np.trapezoid(means, levels) / (means[0] * 0.4)
    assert row["robustness_index"] == pytest.approx(expected_ri)
    assert row["max_level"] == 0.4
    # the clean run is level 0 of the multiplicative sweep too (applied to test only)
    mult = table.loc[("iforest", "multiplicative", "test")]
    assert mult["mean@0"] == pytest.approx(_mean("iforest", "none", "both", 0.0))
    assert np.isnan(mult["mean@0.1"])  # that sweep has no such level
    assert mult["relative_drop"] == pytest.approx(0.5)
    # ranks among the variants of one sweep; reference: scipy.stats.rankdata (1 = best)
    for sweep in (("additive", "both"), ("multiplicative", "test")):
        part = table.xs(sweep, level=("kind", "apply_to"))
        for label in ("0", "0.4") if sweep[0] == "additive" else ("0", "0.2"):
            expected = stats.rankdata(-part[f"mean@{label}"].to_numpy())
            np.testing.assert_array_equal(part[f"rank@{label}"].to_numpy(), expected)
    assert table.loc[("pca", "additive", "both"), "rank@0.4"] == 2.0


def test_summary_filters_threshold_kind_and_apply_to():
    frame = _frame()
    pot = sweep_summary(frame, "pa_f1", threshold="pot", kind="additive")
    assert set(pot["kind"]) == {"additive"}
    pca = pot.set_index("variant").loc["pca"]
    assert pca["mean@0"] == pytest.approx(_mean("pca", "none", "both", 0.0) / 2)
    test_only = sweep_summary(frame, "pa_f1", apply_to="test")
    assert set(zip(test_only["kind"], test_only["apply_to"], strict=True)) == {
        ("multiplicative", "test")
    }


def test_threshold_free_metric_is_found_whatever_threshold_is_asked():
    table = sweep_summary(_frame(), "roc_auc", threshold="oracle", kind="additive")
    iforest = table.set_index("variant").loc["iforest"]
    assert iforest["mean@0"] == pytest.approx(1 - _mean("iforest", "none", "both", 0.0))


def test_lower_is_better_metrics_rank_the_smallest_first():
    frame = _frame().query("threshold == 'oracle'").assign(metric="delay_mean")
    table = sweep_summary(frame, "delay_mean", kind="additive").set_index("variant")
    assert table.loc["iforest", "rank@0"] == 1.0  # smaller delay = better


def test_curves_mean_and_sample_std_over_entities_and_seeds():
    curves = sweep_curves(_frame(), "pa_f1", kind="additive").set_index(["variant", "level"])
    values = CELLS[("iforest", "additive", "both", 0.1)]
    row = curves.loc[("iforest", 0.1)]
    # reference: numpy mean and std with ddof=1
    assert row["mean"] == pytest.approx(np.mean(values))
    assert row["std"] == pytest.approx(np.std(values, ddof=1))
    assert row["n"] == 4
    assert list(curves.columns) == ["kind", "apply_to", "mean", "std", "n"]
    assert curves.loc[("pca", 0.0), "mean"] == pytest.approx(_mean("pca", "none", "both", 0.0))


def test_no_sweep_gives_an_empty_summary_and_unknown_metric_a_clear_error():
    clean_only = _frame().query("noise_kind == 'none'")
    assert sweep_summary(clean_only, "pa_f1").empty
    assert sweep_summary(_frame().iloc[:0], "pa_f1").empty  # a store with no results yet
    assert sweep_curves(pd.DataFrame(), "pa_f1").empty
    with pytest.raises(SpecError, match=r"metric: 'nope' is not in these results; present: "):
        sweep_summary(_frame(), "nope")


def test_additive_noise_lowers_a_classical_detectors_point_adjusted_f1_on_the_demo():
    """Issue 7's demo check, on invented data (the built-in demo scenario).

    The incidents are spikes (1 to 3 steps): on events that short, point adjustment cannot
    hide the loss, whereas on the demo's long incidents noise-dominated scores keep a PA F1
    near the random-score reference (the inflation the reports warn about).
    """
    from benchkit.data.demo import make_demo
    from benchkit.metrics.best import best_f1
    from benchkit.noise import apply_perturbation, parse_sweeps
    from benchkit.registry import create
    from benchkit.windows import Scaler

    demo = make_demo(seed=0, n_entities=2, n_train=1500, n_test=1500, incidents={"spike": 6})
    sweep = parse_sweeps([{"kind": "additive", "levels": [0, 1.0, 3.0], "apply_to": "both"}])
    rows = []
    for entity in demo.entities:
        labels_before = entity.labels.copy()
        for perturbation in sweep:
            train, test = apply_perturbation(
                entity.train, entity.test, perturbation, seed=0, entity=entity.name
            )
            scaler = Scaler().fit(train)
            train, test = scaler.transform(train), scaler.transform(test)
            for name in ("pca-residual", "step-change"):
                detector = create(name).fit(train)
                context = detector.warmup  # train steps that let the first test step be scored
                scores = detector.score(np.vstack([train[len(train) - context :], test]))
                value = best_f1(scores[context:], entity.labels, adjust="point").f1
                rows.append({"variant": name, "noise_kind": perturbation.kind,
                             "noise_level": perturbation.level,
                             "noise_apply": perturbation.apply_to, "threshold": "oracle",
                             "metric": "pa_f1", "value": value})  # fmt: skip
        assert np.array_equal(entity.labels, labels_before)  # noise never touches labels
    table = sweep_summary(pd.DataFrame(rows), "pa_f1")
    assert set(table["kind"]) == {"additive"} and (table["max_level"] == 3.0).all()
    lower = table["mean@3"] < table["mean@0"]
    assert lower.any(), table.to_string()
    assert (table.loc[lower, "relative_drop"] > 0).all()
    assert (table.loc[lower, "robustness_index"] < 1).all()
