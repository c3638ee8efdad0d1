"""Threshold-free ranking metrics: ROC-AUC and PR-AUC (average precision).

``-inf`` scores rank below every finite score. Both are NaN when the labels hold one class only.
"""

from __future__ import annotations

import numpy as np
from scipy.stats import rankdata

from benchkit.metrics.inputs import scores_and_labels
from benchkit.metrics.ranking import Tally


def roc_auc(scores: object, labels: object) -> float:
    """Area under the ROC curve: the chance that a labelled point outscores an unlabelled one,
    ties counting one half (the Mann-Whitney U statistic over n_pos·n_neg).
    """
    s, y = scores_and_labels(scores, labels)
    n_pos = int(np.count_nonzero(y))
    n_neg = len(y) - n_pos
    if n_pos == 0 or n_neg == 0:
        return float("nan")
    rank_sum = float(rankdata(s)[y].sum())
    return (rank_sum - n_pos * (n_pos + 1) / 2.0) / (n_pos * n_neg)


def pr_auc(scores: object, labels: object) -> float:
    """Average precision: Σ over thresholds of (R_k − R_{k−1})·P_k, thresholds descending
    over the distinct scores (no interpolation).
    """
    s, y = scores_and_labels(scores, labels)
    n_pos = int(np.count_nonzero(y))
    if n_pos == 0 or n_pos == len(y):
        return float("nan")
    thresholds = np.unique(s[y])[::-1]
    tp = Tally(s[y]).at_least(thresholds)
    fp = Tally(s[~y]).at_least(thresholds)
    gained = np.diff(tp, prepend=0)
    return float(np.sum(gained * (tp / (tp + fp))) / n_pos)
