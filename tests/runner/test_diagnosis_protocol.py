"""Diagnosis in one cell: attributions cached at event steps only, HitRate/NDCG per strategy,
per-kind recall, the same values again from the cache (rescore), and bad attributions refused."""

from __future__ import annotations

import numpy as np
import pytest

from benchkit.data.model import Entity, Event
from benchkit.diagnosis import EventData
from benchkit.noise import CLEAN
from benchkit.protocol import BadScores, CellTask, Evaluation, check_attributions, run_cell
from benchkit.spec import ThresholdSpec


def _entity() -> Entity:
    # invented data: four KPIs driven by one shared signal; event 1 breaks KPI 2 away from the
    # others, event 2 breaks KPIs 0 and 3; event 3 has no metadata
    rng = np.random.default_rng(4)
    t = np.arange(900.0)
    shared = np.sin(2 * np.pi * t / 40.0)[:, None] * np.array([1.0, 0.8, 1.2, 0.9])
    series = shared + 0.05 * rng.normal(size=(900, 4))
    train, test = series[:500], series[500:].copy()
    test[100:110, 2] += 3.0
    test[250:262, 0] += 2.5  # opposite moves: almost orthogonal to the shared direction
    test[250:262, 3] -= 2.5
    labels = np.zeros(400, dtype=np.int8)
    labels[100:110] = labels[250:262] = labels[330:335] = 1
    events = (Event(100, 109, (2,), "metric"), Event(250, 261, (0, 3), "temporal"),
              Event(330, 334))  # fmt: skip
    return Entity("larkspur-node", train, test, labels, ("a", "b", "c", "d"), events=events)


def _run(detector: str, params: dict, entity: Entity, cached=None, constant="keep"):
    evaluation = Evaluation(ThresholdSpec(), {})
    task = CellTask("k", detector, params, 0, entity.name, CLEAN, "zscore", evaluation, 60.0,
                    entity, cached, constant_channels=constant)  # fmt: skip
    return run_cell(task)


def test_attributions_are_cached_inside_culprit_events_only_and_point_at_the_culprits():
    entity = _entity()
    result = _run("pca-residual", {"n_components": 1}, entity)
    scores = result.scores
    steps = scores["attribution_steps"]
    assert steps.tolist() == list(range(100, 110)) + list(range(250, 262))
    assert scores["attributions"].shape == (22, 4)
    assert result.measures["attribute_seconds"] >= 0.0
    m = result.metrics
    # the broken KPIs dominate the PCA residual, so every detected point ranks them first
    assert m[("oracle", "diagnosed_events")] == 2.0
    assert m[("oracle", "hit_rate@100")] == 1.0 and m[("oracle", "ndcg@150")] == 1.0
    # chance on the same events (Su et al.'s k with g = 1 and 2 of d = 4): (1/4 + 2/4) / 2
    assert m[("oracle", "chance_hit_rate@100")] == pytest.approx(0.375)
    assert m[("none", "culprit_events")] == 2.0
    assert m[("none", "events[metric]")] == 1.0 and m[("none", "events[temporal]")] == 1.0
    assert m[("oracle", "event_recall[metric]")] == 1.0


def test_rescoring_from_the_cache_gives_the_same_diagnosis():
    entity = _entity()
    first = _run("pca-residual", {"n_components": 1}, entity)
    cached = {**first.scores, **first.thresholds}
    again = _run("pca-residual", {"n_components": 1}, entity, cached=cached)
    assert again.evaluated_only
    picked = {k: v for k, v in first.metrics.items() if "@" in k[1] or "[" in k[1]}
    assert picked and all(again.metrics[k] == v or (np.isnan(v) and np.isnan(again.metrics[k]))
                          for k, v in picked.items())


def test_a_channel_dropped_before_the_detector_ranks_last_under_its_own_index():
    entity = _entity()
    train = entity.train.copy()
    train[:, 1] = 0.5  # constant over train: constant_channels = "drop" removes it
    dropped = Entity(entity.name, train, entity.test, entity.labels, entity.channels,
                     events=entity.events)  # fmt: skip
    result = _run("pca-residual", {"n_components": 1}, dropped, constant="drop")
    attributions = result.scores["attributions"]
    assert attributions.shape == (22, 4)  # culprit indices still name the entity's 4 KPIs
    assert np.isneginf(attributions[:, 1]).all() and np.isfinite(attributions[:, [0, 2, 3]]).all()


def test_a_detector_without_attribution_still_gets_per_kind_recall():
    result = _run("isolation-forest", {"n_estimators": 20}, _entity())
    assert "attributions" not in result.scores
    assert result.measures["attribute_seconds"] is None
    assert not any(k[1].startswith("hit_rate") for k in result.metrics)
    assert ("pot", "event_recall[temporal]") in result.metrics


def test_data_without_metadata_adds_nothing():
    entity = _entity()
    bare = Entity(entity.name, entity.train, entity.test, entity.labels, entity.channels)
    result = _run("pca-residual", {"n_components": 1}, bare)
    assert "event_kinds" not in result.scores
    assert not any("@" in k[1] or "[" in k[1] for k in result.metrics)


def test_event_metadata_round_trips_through_the_cache_arrays():
    data = EventData(((2,), None, (0, 3)), ("metric", None, "temporal"),
                     np.ones((3, 4)), np.array([1, 2, 3]))  # fmt: skip
    back = EventData.from_arrays(data.arrays())
    assert back.culprits == data.culprits and back.kinds == data.kinds
    np.testing.assert_array_equal(back.attributions, data.attributions)


@pytest.mark.parametrize(
    ("raw", "message"),
    [
        (np.zeros((4, 2)), r"shape \(4, 2\); expected \(4, 3\)"),
        (np.array([[0.0] * 3, [np.nan] * 3, [0.0] * 3, [1.0] * 3]), "first at step 1, channel 0"),
    ],
)
def test_bad_attributions_fail_the_cell_with_a_clear_message(raw, message):
    with pytest.raises(BadScores, match=message):
        check_attributions(raw, 4, 3, 0)
