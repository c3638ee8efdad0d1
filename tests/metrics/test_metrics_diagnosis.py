"""HitRate@P% and NDCG@P% against the published definition, sklearn and chance; per-kind recall.

Definition checked: Su et al., KDD 2019 (HitRate@P%: |culprits ∩ top floor(P% · g)| / g).
NDCG with binary relevance: Järvelin & Kekäläinen (2002); the reference implementation is
``sklearn.metrics.ndcg_score``.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn.metrics import ndcg_score

from benchkit.metrics import (
    MetricInputError,
    chance_hit_rate,
    diagnosis_metrics,
    hit_rate,
    kind_recall,
    ndcg_at,
)

ATTR = [0.9, 0.1, 0.5, 0.3]  # ranking: channel 0, 2, 3, 1


def test_hit_rate_hand_worked_from_the_definition():
    # hand-worked from Su et al.'s definition: g = 2 culprits {0, 3}
    assert hit_rate(ATTR, [0, 3], 1.0) == 0.5  # k = 2: top {0, 2} holds one culprit
    assert hit_rate(ATTR, [0, 3], 1.5) == 1.0  # k = 3: top {0, 2, 3} holds both
    assert hit_rate(ATTR, [1], 1.5) == 0.0  # k = floor(1.5) = 1: top {0}
    assert hit_rate(ATTR, [2, 3, 1], 1.5) == 1.0  # k = floor(4.5) = 4 = every channel


def test_ndcg_hand_worked():
    # DCG at k = 2: culprit 0 at rank 1 -> 1/log2(2); ideal: two culprits at ranks 1, 2
    ideal = 1.0 + 1.0 / math.log2(3)
    assert ndcg_at(ATTR, [0, 3], 1.0) == pytest.approx(1.0 / ideal)
    # k = 3: culprit 3 enters at rank 3 -> + 1/log2(4); the ideal stays min(k, g) = 2 hits
    assert ndcg_at(ATTR, [0, 3], 1.5) == pytest.approx((1.0 + 0.5) / ideal)


def test_ties_go_to_the_lower_channel_index():
    # the tie rule: equal attributions rank the lower channel index first
    flat = [1.0, 1.0, 1.0, 1.0]
    assert hit_rate(flat, [0], 1.0) == 1.0
    assert hit_rate(flat, [3], 1.0) == 0.0


def test_k_is_floored_without_float_trouble():
    # floor(2.3 * 100) must be 230, although 2.3 * 100 == 229.99999999999997 in floats
    attr = -np.arange(400.0)  # ranking 0, 1, 2, ...
    culprits = list(range(229, 329))  # 100 culprits: 229 .. 328
    assert hit_rate(attr, culprits, 2.3) == pytest.approx(1 / 100)  # only 229 is in the top 230


@pytest.mark.parametrize("seed", range(5))
def test_ndcg_matches_sklearn_on_random_cases(seed):
    # reference: sklearn.metrics.ndcg_score (continuous draws, so no ties to average over)
    rng = np.random.default_rng(seed)
    for _ in range(40):
        d = int(rng.integers(2, 30))
        g = int(rng.integers(1, d + 1))
        attr = rng.normal(size=d)
        culprits = rng.choice(d, size=g, replace=False)
        relevance = np.zeros(d)
        relevance[culprits] = 1.0
        for p in (0.5, 1.0, 1.5, 2.0):
            k = math.floor(p * g + 1e-9)
            if k == 0:
                assert ndcg_at(attr, culprits, p) == 0.0
                continue
            expected = ndcg_score(relevance[None, :], attr[None, :], k=k)
            assert ndcg_at(attr, culprits, p) == pytest.approx(expected, abs=1e-12)


def _reference_hit_rate(attr, culprits, p):
    # a second, plain reading of the definition: python sort, stable on the channel index
    g = len(set(culprits))
    k = math.floor(p * g + 1e-9)
    ranked = sorted(range(len(attr)), key=lambda c: (-attr[c], c))
    return len(set(ranked[:k]) & set(culprits)) / g


def test_hit_rate_agrees_with_a_plain_reading_on_random_cases():
    rng = np.random.default_rng(7)
    for _ in range(300):
        d = int(rng.integers(1, 40))
        attr = rng.integers(0, 5, size=d).astype(float)  # many ties
        culprits = list(rng.choice(d, size=int(rng.integers(1, d + 1)), replace=False))
        p = float(rng.choice([0.5, 1.0, 1.5, 2.0, 3.0]))
        assert hit_rate(attr, culprits, p) == _reference_hit_rate(attr, culprits, p)


def test_random_attributions_hit_g_over_d_on_average():
    # property from the issue: a uniformly random ranking has expected HitRate@100% = g / d
    rng = np.random.default_rng(3)
    d, g = 20, 4
    culprits = [1, 5, 9, 17]
    draws = [hit_rate(rng.random(d), culprits, 1.0) for _ in range(4000)]
    assert np.mean(draws) == pytest.approx(g / d, abs=0.01)  # std of the mean ~ 0.003
    assert chance_hit_rate(1.0, g, d) == g / d
    assert chance_hit_rate(1.5, g, d) == 6 / d


def test_bad_inputs_name_the_argument():
    with pytest.raises(MetricInputError, match="culprits"):
        hit_rate(ATTR, [], 1.0)
    with pytest.raises(MetricInputError, match="culprits"):
        hit_rate(ATTR, [4], 1.0)
    with pytest.raises(MetricInputError, match="p:"):
        hit_rate(ATTR, [0], 0.0)
    with pytest.raises(MetricInputError, match="attribution"):
        ndcg_at([0.1, np.nan], [0], 1.0)


def test_event_values_average_over_detected_points_only():
    # hand-worked: two events, culprits known for both, one detected at two points
    labels = np.array([0, 1, 1, 1, 0, 0, 1, 1, 0])
    pred = np.array([0, 1, 0, 1, 0, 0, 0, 0, 0])
    steps = np.array([1, 2, 3, 6, 7])
    attr = np.array(
        [
            [3.0, 2.0, 1.0],  # step 1: culprit 0 ranked first -> HitRate@100% = 1
            [0.0, 0.0, 9.0],  # step 2: not detected, ignored
            [1.0, 2.0, 3.0],  # step 3: culprit 0 ranked last -> 0
            [1.0, 1.0, 1.0],
            [1.0, 1.0, 1.0],
        ]
    )
    out = diagnosis_metrics(pred, labels, [(0,), (1, 2)], attr, steps, ps=(100, 150))
    assert out["diagnosed_events"] == 1.0  # the second event is not detected
    assert out["hit_rate@100"] == 0.5
    assert out["hit_rate@150"] == 0.5  # k = floor(1.5) = 1, as at 100 %
    assert out["ndcg@100"] == 0.5
    assert out["chance_hit_rate@100"] == pytest.approx(1 / 3)


def test_events_without_culprits_are_not_diagnosed():
    labels = np.array([1, 1, 0, 1])
    pred = np.array([1, 0, 0, 1])
    attr = np.array([[1.0, 0.0], [1.0, 0.0], [0.0, 1.0]])
    out = diagnosis_metrics(pred, labels, [None, (1,)], attr, [0, 1, 3], ps=(100,))
    assert out["diagnosed_events"] == 1.0
    assert out["hit_rate@100"] == 1.0
    nothing = diagnosis_metrics(np.zeros(4, int), labels, [None, (1,)], attr, [0, 1, 3])
    assert nothing["diagnosed_events"] == 0.0 and math.isnan(nothing["hit_rate@150"])


def test_missing_attribution_rows_are_an_error():
    labels = np.array([1, 1, 0])
    with pytest.raises(MetricInputError, match="steps"):
        diagnosis_metrics(labels, labels, [(0,)], np.ones((1, 2)), [0])


def test_kind_recall_counts_detected_events_per_kind():
    labels = np.array([1, 0, 1, 0, 1, 1, 0, 1])
    pred = np.array([1, 0, 0, 0, 0, 1, 0, 0])
    kinds = ["metric", "temporal", "metric", None]
    assert kind_recall(pred, labels, kinds) == {"metric": 1.0, "temporal": 0.0}
    with pytest.raises(MetricInputError, match="kinds"):
        kind_recall(pred, labels, ["metric"])
