"""Expected best point-adjusted F1 of uniformly random scores."""

from math import comb

import numpy as np
import pytest

from benchkit.metrics import MetricInputError, best_f1, random_pa_f1


def _exact_one_event(length: int, negatives: int) -> tuple[float, float]:
    """Mean and variance of the best PA-F1 for one event, derived by hand.

    With random scores the points form a uniformly random order; the event activates at its
    first point in descending order, after f unlabelled points with probability
    C(N + L - 1 - f, L - 1) / C(N + L, L). The only useful threshold then has TP = L, FP = f,
    FN = 0, so the best PA-F1 is 2L / (2L + f).
    """
    total = comb(negatives + length, length)
    f = np.arange(negatives + 1)
    prob = np.array([comb(negatives + length - 1 - x, length - 1) for x in f]) / total
    value = 2 * length / (2 * length + f)
    mean = float(np.sum(prob * value))
    return mean, float(np.sum(prob * value**2) - mean**2)


@pytest.mark.parametrize(("length", "negatives"), [(1, 9), (4, 30), (10, 200)])
def test_matches_the_exact_one_event_law(length, negatives):
    labels = np.zeros(length + negatives, dtype=np.int8)
    labels[3 : 3 + length] = 1
    draws = 20000
    mean, variance = _exact_one_event(length, negatives)
    got = random_pa_f1(labels, draws=draws, seed=1)
    assert got == pytest.approx(mean, abs=5 * np.sqrt(variance / draws) + 1e-12)


def test_agrees_with_scoring_random_vectors():
    # sanity check on invented labels: the average of best_f1(adjust="point") over explicit
    # uniform score vectors estimates the same expectation
    rng = np.random.default_rng(0)
    labels = np.zeros(400, dtype=np.int8)
    for start, size in [(10, 1), (50, 5), (120, 20), (300, 3), (395, 5)]:
        labels[start : start + size] = 1
    explicit = [best_f1(rng.random(400), labels, "point").f1 for _ in range(1500)]
    spread = np.std(explicit) / np.sqrt(1500)
    got = random_pa_f1(labels, draws=6000, seed=3)
    assert got == pytest.approx(np.mean(explicit), abs=5 * spread)


def test_edge_cases():
    # by hand: no events -> no threshold can score; all labelled -> the top score gives F1 1
    assert random_pa_f1(np.zeros(50)) == 0.0
    assert random_pa_f1(np.ones(50)) == 1.0
    # single-point events at both ends of the series, no negatives in between
    assert random_pa_f1(np.array([1, 1])) == 1.0


def test_seed_makes_it_repeatable():
    labels = np.zeros(1000, dtype=np.int8)
    labels[[5, 6, 7, 400, 401, 990]] = 1
    assert random_pa_f1(labels, seed=4) == random_pa_f1(labels, seed=4)
    assert random_pa_f1(labels, seed=4) != random_pa_f1(labels, seed=5)


@pytest.mark.parametrize("draws", [0, -3, 2.5, True])
def test_rejects_bad_draws(draws):
    with pytest.raises(MetricInputError, match="draws: expected an integer >= 1"):
        random_pa_f1(np.array([0, 1]), draws=draws)
