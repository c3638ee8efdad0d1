"""Bad input: one clear line naming the argument, as a ValueError the CLI reports."""

import numpy as np
import pytest

from benchkit.errors import BenchkitInputError
from benchkit.metrics import (
    MetricInputError,
    best_range_f1,
    metric_set,
    oracle_metric_set,
    pr_auc,
    prf,
    random_pa_f1,
    range_precision_recall,
    roc_auc,
)


def test_error_type_is_a_value_error_the_cli_reports():
    assert issubclass(MetricInputError, ValueError)
    assert issubclass(MetricInputError, BenchkitInputError)


@pytest.mark.parametrize(
    ("call", "needle"),
    [
        (lambda: prf([0, 1], [0, 1, 1]), "pred has 2 values but labels has 3"),
        (lambda: prf([0, 2], [0, 1]), "pred: values must be 0 or 1, found 2 at index 1"),
        (lambda: prf([0, 1], [0.5, 1]), "labels: values must be 0 or 1, found 0.5 at index 0"),
        (lambda: prf([0, 1], [np.nan, 1]), "labels: values must be 0 or 1, found nan"),
        (lambda: prf([0, 1], ["a", "b"]), "labels: expected 0/1 values, got dtype"),
        (lambda: prf([[0, 1]], [0, 1]), "pred: expected a 1-D array, got shape (1, 2)"),
        (lambda: range_precision_recall([0, 1], [1]), "pred has 2 values but labels has 1"),
        (lambda: metric_set([0, 1, 1], [0, 1]), "pred has 3 values but labels has 2"),
        (lambda: oracle_metric_set([0.1, np.nan], [0, 1]), "scores: NaN and +inf"),
        (lambda: best_range_f1([0.1, np.inf], [0, 1]), "found inf at index 1"),
        (lambda: best_range_f1([0.1, 0.2], [0, 1], n_thresholds=1), "n_thresholds: expected"),
        (lambda: roc_auc([0.1, 0.2], [0, 1, 0]), "scores has 2 values but labels has 3"),
        (lambda: pr_auc(["x", "y"], [0, 1]), "scores: expected numbers"),
        (lambda: random_pa_f1([0, 3]), "labels: values must be 0 or 1, found 3 at index 1"),
    ],
)
def test_bad_input_names_the_argument_in_one_line(call, needle):
    with pytest.raises(MetricInputError) as info:
        call()
    message = str(info.value)
    assert needle in message
    assert "\n" not in message
