"""ROC-AUC and PR-AUC."""

import math

import numpy as np
import pytest
from metrics_cases import random_labels
from scipy.stats import mannwhitneyu
from sklearn.metrics import average_precision_score, roc_auc_score

from benchkit.metrics import pr_auc, roc_auc


@pytest.mark.parametrize("seed", range(15))
def test_match_scikit_learn_and_scipy(seed):
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 400))
    labels = random_labels(rng, n)
    labels[:2] = [0, 1]
    scores = np.round(rng.normal(size=n) + labels, 1)  # ties on purpose
    # reference: sklearn.metrics.roc_auc_score and average_precision_score
    assert roc_auc(scores, labels) == pytest.approx(roc_auc_score(labels, scores), abs=1e-12)
    assert pr_auc(scores, labels) == pytest.approx(
        average_precision_score(labels, scores), abs=1e-12
    )
    # reference: scipy.stats.mannwhitneyu, AUC = U / (n_pos · n_neg)
    u = mannwhitneyu(scores[labels == 1], scores[labels == 0]).statistic
    assert roc_auc(scores, labels) == pytest.approx(
        u / (labels.sum() * (n - labels.sum())), abs=1e-12
    )


def test_minus_infinity_ranks_lowest():
    scores = np.array([-np.inf, -np.inf, 0.3, 0.9, 0.1, 0.5])
    labels = np.array([1, 0, 0, 1, 0, 1])
    finite = np.where(np.isinf(scores), -1.0, scores)  # same order, finite
    # reference: scikit-learn on the order-preserving finite copy
    assert roc_auc(scores, labels) == pytest.approx(roc_auc_score(labels, finite))
    assert pr_auc(scores, labels) == pytest.approx(average_precision_score(labels, finite))


@pytest.mark.parametrize("labels", [[0, 0, 0], [1, 1, 1]])
def test_one_class_gives_nan(labels):
    assert math.isnan(roc_auc(np.arange(3.0), np.array(labels)))
    assert math.isnan(pr_auc(np.arange(3.0), np.array(labels)))


def test_worked_example():
    # by hand: positives 0.9, 0.5; negatives 0.3, 0.1 -> every pair ordered, AUC 1, AP 1;
    # swap one: ranks 0.9(+) 0.5(-) 0.3(+) 0.1(-) -> AUC 3/4, AP = (1 + 2/3)/2
    assert roc_auc([0.9, 0.5, 0.3, 0.1], [1, 1, 0, 0]) == 1.0
    assert pr_auc([0.9, 0.5, 0.3, 0.1], [1, 1, 0, 0]) == 1.0
    assert roc_auc([0.9, 0.5, 0.3, 0.1], [1, 0, 1, 0]) == pytest.approx(0.75)
    assert pr_auc([0.9, 0.5, 0.3, 0.1], [1, 0, 1, 0]) == pytest.approx((1 + 2 / 3) / 2)
