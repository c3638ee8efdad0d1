"""The alert-budget threshold: within budget on train, its spec keys, and its metrics.

Common practice, no source: operators size alerting by the false alerts per day that page
someone and judge detection by how soon an incident is caught; the budget threshold is the
lowest one whose false alerts per day on train (normal operation) stay within that budget.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchkit.cli import main
from benchkit.errors import SpecError
from benchkit.metrics import count_alerts
from benchkit.protocol import Evaluation, evaluate
from benchkit.spec import ThresholdSpec, dumps_toml, parse_spec
from benchkit.thresholds import alert_budget_threshold

STEP = 300.0  # seconds: 288 steps a day


@settings(max_examples=60, deadline=None)
@given(
    seed=st.integers(0, 10_000),
    budget=st.sampled_from([0.0, 0.5, 1.0, 3.0, 20.0]),
    gap=st.integers(0, 4),
)
def test_train_false_alerts_per_day_stay_within_the_budget(seed, budget, gap):
    rng = np.random.default_rng(seed)
    scores = np.round(rng.gamma(2.0, size=int(rng.integers(50, 2000))), 2)
    result = alert_budget_threshold(scores, budget, gap, STEP, "day")
    days = len(scores) * STEP / 86_400
    false = count_alerts(scores >= result.threshold, np.zeros(len(scores)), gap)[1]
    # the property of the issue: at a budget of B per day, train false alerts per day <= B
    assert false / days <= budget + 1e-12
    assert false == result.train_false_alerts
    # lowest such threshold: the next lower distinct score (if any) breaks the budget, or some
    # higher threshold does (the walk from the top stops at the first excess)
    lower = scores[scores < result.threshold]
    if len(lower):
        below = lower.max()
        higher = np.unique(scores[scores >= below])
        counts = [count_alerts(scores >= h, np.zeros(len(scores)), gap)[1] for h in higher]
        assert max(counts) / days > budget


def test_budget_per_thousand_steps_needs_no_step():
    scores = np.tile([0.0, 0.0, 0.0, 5.0], 500)  # one spike every 4 steps: 250 per 1,000
    strict = alert_budget_threshold(scores, 10.0, 0, None, "1000-steps")
    assert strict.threshold > 5.0 and strict.train_false_alerts == 0
    loose = alert_budget_threshold(scores, 250.0, 0, None, "1000-steps")
    assert loose.threshold == 0.0  # every step predicted: one alert, within 250 per 1,000
    with pytest.raises(ValueError, match="step length"):
        alert_budget_threshold(scores, 1.0, 0, None, "day")


BASE = {
    "name": "t",
    "datasets": [{"source": "demo", "options": {"n_entities": 1}}],
    "detectors": [{"name": "random"}],
}


@pytest.mark.parametrize(
    ("thresholds", "message"),
    [
        ({"alert_budget": -1.0}, "thresholds.alert_budget: expected a number >= 0, got -1.0"),
        ({"alert_budget": "1"}, 'thresholds.alert_budget: expected a number, got "1"'),
        ({"merge_gap": -2}, "thresholds.merge_gap: expected an integer >= 0, got -2"),
        ({"alert_budget_per": "week"}, "thresholds.alert_budget_per: expected one of day"),
        ({"strategies": ["budget"]}, "thresholds.strategies[0]: expected one of"),
    ],
)
def test_bad_budget_keys_name_their_key_path(thresholds, message):
    with pytest.raises(SpecError) as info:
        parse_spec({**BASE, "thresholds": thresholds})
    assert str(info.value).startswith(message), str(info.value)


def test_budget_per_day_without_a_step_stops_with_one_line(tmp_path, capsys):
    # a split folder without the step option: its entities have no step length
    rng = np.random.default_rng(0)
    for part in ("train", "test"):
        (tmp_path / "data" / part).mkdir(parents=True)
        np.savetxt(tmp_path / "data" / part / "e1.txt", rng.random((300, 2)), delimiter=",")
    (tmp_path / "data" / "test_label").mkdir()
    labels = np.zeros(300, dtype=int)
    labels[100:110] = 1
    np.savetxt(tmp_path / "data" / "test_label" / "e1.txt", labels, fmt="%d")
    spec = {**BASE, "datasets": [{"source": str(tmp_path / "data")}],
            "thresholds": {"strategies": ["pot", "alert-budget"]}}
    path = tmp_path / "spec.toml"
    path.write_text(dumps_toml(spec), encoding="utf-8")
    out = tmp_path / "out"
    assert main(["run", str(path), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert "thresholds.alert_budget" in err and "e1" in err and "\n" not in err
    assert not (out / "results.sqlite").exists()


def test_evaluate_reports_false_alerts_per_day_under_the_budget():
    rng = np.random.default_rng(4)
    labels = np.zeros(2000, dtype=np.int8)
    labels[500:520] = labels[1500:1530] = 1
    test = rng.random(2000) + 2.0 * labels
    train = rng.random(4000)
    cfg = ThresholdSpec(strategies=("pot", "alert-budget"), alert_budget=2.0, merge_gap=3)
    metrics, used = evaluate(test, train, labels, 0, Evaluation(cfg, {}), STEP)
    theta = used["threshold_alert_budget"]
    # reference: our count_alerts (checked by hand above) on the thresholded test scores
    true, false = count_alerts(test >= theta, labels, 3)
    assert metrics[("alert-budget", "false_alerts")] == false
    assert metrics[("alert-budget", "true_alerts")] == true
    assert metrics[("alert-budget", "false_alerts_per_day")] == pytest.approx(
        false / (2000 * STEP / 86_400)
    )
    assert used["alert_budget_train_false_alerts"] / (4000 * STEP / 86_400) <= 2.0
    assert ("pot", "false_alerts_per_day") in metrics
    # the peeking twin: best event recall with at most 2 false alerts per day on test
    twin = used["threshold_alert_budget_oracle"]
    assert count_alerts(test >= twin, labels, 3)[1] / (2000 * STEP / 86_400) <= 2.0
    assert metrics[("alert-budget-oracle", "event_recall")] >= metrics[
        ("alert-budget", "event_recall")
    ] or metrics[("alert-budget", "false_alerts_per_day")] > 2.0
