"""metric_set, oracle_metric_set and MetricOptions."""

import dataclasses

import numpy as np
import pytest
from metrics_cases import brute_best_f1, random_labels, random_scores

from benchkit.metrics import (
    MetricInputError,
    MetricOptions,
    composite_f1,
    delay_adjust,
    detection_delays,
    event_recall,
    metric_set,
    oracle_metric_set,
    pa_k_adjust,
    pa_k_f1_auc,
    prf,
    range_precision_recall,
)

# the thresholded names of the metrics table in docs/internals.md, default options
DOCUMENTED = [
    "precision", "recall", "f1", "pa_precision", "pa_recall", "pa_f1",
    "pak5_f1", "pak20_f1", "pak50_f1", "pak_auc_f1",
    "delay_precision", "delay_recall", "delay_f1",
    "event_recall", "composite_f1", "delay_mean", "delay_median",
    "range_precision", "range_recall", "range_f1",
]  # fmt: skip
F1_NAMES = ["f1", "pa_f1", "pak5_f1", "pak20_f1", "pak50_f1", "delay_f1", "range_f1"]


def _case(seed, n=50):
    rng = np.random.default_rng(seed)
    return random_scores(rng, n), random_labels(rng, n)


def test_metric_set_names_follow_the_documented_table():
    scores, labels = _case(0)
    assert list(metric_set(scores > 3, labels)) == DOCUMENTED
    metrics, thresholds = oracle_metric_set(scores, labels)
    assert list(metrics) == DOCUMENTED
    assert list(thresholds) == F1_NAMES
    options = MetricOptions(pa_k=[10, 90])
    assert [k for k in metric_set(scores > 3, labels, options) if k.startswith("pak")] == [
        "pak10_f1", "pak90_f1", "pak_auc_f1"
    ]


@pytest.mark.parametrize("seed", range(6))
def test_metric_set_values_are_the_single_metrics(seed):
    scores, labels = _case(seed)
    pred = scores >= 3
    options = MetricOptions(pa_k=(5, 20, 50), delay=2, range_alpha=0.5,
                            range_cardinality="reciprocal", range_bias="front")
    got = metric_set(pred, labels, options)
    assert (got["precision"], got["recall"], got["f1"]) == prf(pred, labels)
    assert got["pa_f1"] == prf(pa_k_adjust(pred, labels, 0), labels)[2]
    assert got["pak20_f1"] == prf(pa_k_adjust(pred, labels, 20), labels)[2]
    assert got["pak_auc_f1"] == pa_k_f1_auc(pred, labels)
    assert got["delay_recall"] == prf(delay_adjust(pred, labels, 2), labels)[1]
    assert got["event_recall"] == event_recall(pred, labels)
    assert got["composite_f1"] == composite_f1(pred, labels)
    np.testing.assert_equal((got["delay_mean"], got["delay_median"]),
                            detection_delays(pred, labels))
    assert got["range_recall"] == range_precision_recall(pred, labels, 0.5, "reciprocal",
                                                         "front")[1]


@pytest.mark.parametrize("seed", range(6))
def test_oracle_is_the_best_over_every_threshold(seed):
    scores, labels = _case(seed, n=40)
    options = MetricOptions(delay=2)
    metrics, thresholds = oracle_metric_set(scores, labels, options)
    at_each = [metric_set(scores >= t, labels, options) for t in np.unique(scores[scores > -1])]
    for name in F1_NAMES + ["pak_auc_f1"]:
        # reference: brute force, each threshold scored on its own
        assert metrics[name] >= max(m[name] for m in at_each) - 1e-12
    for name in F1_NAMES:
        assert metric_set(scores >= thresholds[name], labels, options)[name] == pytest.approx(
            metrics[name]
        )
    at_f1 = metric_set(scores >= thresholds["f1"], labels, options)
    for name in ("event_recall", "composite_f1", "delay_mean", "delay_median"):
        np.testing.assert_equal(metrics[name], at_f1[name])
    # the area under best-F1-versus-K, each best by brute force; reference: numpy.trapezoid
    by_k = [brute_best_f1(scores, labels, "pa%k", k=k)[0] for k in range(101)]
    assert metrics["pak_auc_f1"] == pytest.approx(np.trapezoid(by_k, np.arange(101)) / 100)


def test_oracle_on_labels_without_events():
    metrics, thresholds = oracle_metric_set(np.arange(5.0), np.zeros(5))
    assert all(v == np.inf for v in thresholds.values())
    assert all(metrics[name] == 0.0 for name in F1_NAMES + ["pak_auc_f1", "event_recall"])
    assert np.isnan(metrics["delay_mean"])


def test_options_are_frozen_and_normalised():
    options = MetricOptions(pa_k=[20, 5], delay=3)
    assert options.pa_k == (20, 5)
    with pytest.raises(dataclasses.FrozenInstanceError):
        options.delay = 4  # type: ignore[misc]


@pytest.mark.parametrize(
    ("kwargs", "needle"),
    [
        ({"pa_k": (5, 101)}, "metrics.pa_k: 101 is not an integer from 0 to 100"),
        ({"pa_k": (5, 5)}, "metrics.pa_k: repeated values"),
        ({"pa_k": (2.5,)}, "metrics.pa_k: 2.5 is not an integer"),
        ({"pa_k": "5"}, "metrics.pa_k: expected a list of integers"),
        ({"delay": -1}, "metrics.delay: expected an integer >= 0, got -1"),
        ({"range_alpha": 2.0}, "metrics.range_alpha: expected a number from 0 to 1"),
        ({"range_bias": "left"}, "metrics.range_bias: 'left' is not one of"),
        ({"range_cardinality": "two"}, "metrics.range_cardinality: 'two' is not one of"),
    ],
)
def test_options_reject_bad_values(kwargs, needle):
    with pytest.raises(MetricInputError) as info:
        MetricOptions(**kwargs)
    assert needle in str(info.value)
