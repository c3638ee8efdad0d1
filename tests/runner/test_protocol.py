"""One cell: train-only scaling, warm-up context, score checks, thresholds and metrics."""

import numpy as np
import pytest
from sklearn.metrics import f1_score, roc_auc_score
from sklearn.preprocessing import MinMaxScaler, StandardScaler

from benchkit.data.model import Entity
from benchkit.noise import CLEAN, make_perturbation
from benchkit.protocol import BadScores, CellTask, Evaluation, check_scores, evaluate, run_cell
from benchkit.spec import ThresholdSpec


def _entity(seed: int = 0) -> Entity:
    # invented data for a sanity check: Gaussian channels, one shifted stretch labelled
    rng = np.random.default_rng(seed)
    train = rng.normal(5.0, 2.0, size=(400, 3))
    test = rng.normal(5.0, 2.0, size=(300, 3))
    labels = np.zeros(300, dtype=np.int8)
    labels[200:220] = 1
    test[200:220, 0] += 12.0
    return Entity("node", train, test, labels, ("a", "b", "c"))


def _task(entity, detector="runner.plugins:Echo", params=None, scaling="zscore", pert=CLEAN):
    params = {"seed": 0, "window": 5} if params is None else params
    evaluation = Evaluation(ThresholdSpec(), {})
    return CellTask("k", detector, params, 0, entity.name, pert, scaling, evaluation, 60.0, entity)


@pytest.mark.parametrize(
    ("scaling", "reference"), [("zscore", StandardScaler), ("minmax", MinMaxScaler)]
)
def test_scaler_is_fitted_on_train_and_test_gets_warmup_context(scaling, reference):
    entity = _entity()
    result = run_cell(_task(entity, scaling=scaling))
    # reference: scikit-learn's scalers fitted on the train part only
    expected = reference().fit(entity.train).transform(entity.test)[:, 0]
    np.testing.assert_allclose(result.scores["test_scores"], expected, rtol=1e-12, atol=1e-12)
    train_scores = result.scores["train_scores"]
    assert np.isneginf(train_scores[:4]).all() and np.isfinite(train_scores[4:]).all()
    assert result.measures["warmup"] == 4 and result.measures["n_test"] == 300
    assert result.measures["fit_seconds"] >= 0 and result.measures["points_per_second"] > 0


def test_perturbation_is_applied_before_scaling():
    entity = _entity()
    clean = run_cell(_task(entity)).scores["test_scores"]
    noisy = run_cell(_task(entity, pert=make_perturbation("additive", 1.0, "test")))
    assert not np.allclose(noisy.scores["test_scores"], clean)
    # train untouched by test-only noise: same scaler, so the train scores are identical
    np.testing.assert_array_equal(
        noisy.scores["train_scores"], run_cell(_task(entity)).scores["train_scores"]
    )


def test_metrics_agree_with_scikit_learn():
    entity = _entity()
    result = run_cell(_task(entity))
    s, y = result.scores["test_scores"], entity.labels
    m, t = result.metrics, result.thresholds
    # reference: sklearn.metrics.roc_auc_score and f1_score on the same scores and thresholds
    assert m[("none", "roc_auc")] == pytest.approx(roc_auc_score(y, s))
    assert m[("pot", "f1")] == pytest.approx(f1_score(y, s >= t["threshold_pot"]))
    assert m[("quantile", "f1")] == pytest.approx(f1_score(y, s >= t["threshold_quantile"]))
    assert m[("oracle", "f1")] == pytest.approx(f1_score(y, s >= t["threshold_oracle_f1"]))
    # reference: numpy.quantile of the train scores after their warm-up
    assert t["threshold_quantile"] == np.quantile(result.scores["train_scores"][4:], 0.99)
    assert {k[0] for k in m} == {"oracle", "pot", "quantile", "none"}


def test_evaluate_honours_the_chosen_strategies():
    rng = np.random.default_rng(1)
    labels = np.zeros(200, dtype=np.int8)
    labels[50:60] = 1
    only_pot = Evaluation(ThresholdSpec(strategies=("pot",)), {})
    metrics, used = evaluate(rng.random(200), rng.random(500), labels, 0, only_pot)
    assert {k[0] for k in metrics} == {"pot", "none"} and "threshold_quantile" not in used


@pytest.mark.parametrize(
    ("raw", "message"),
    [
        (
            np.array([0.0, np.nan, 1.0, 2.0]),
            r"1 non-finite score\(s\) after the warm-up of 0 steps \(first at step 1",
        ),
        (np.zeros(3), r"scores of shape \(3,\); expected \(4,\)"),
        (np.zeros((4, 1)), r"scores of shape \(4, 1\); expected \(4,\)"),
        (np.array(["a", "b", "c", "d"]), r"scores of dtype <U1; expected float64"),
    ],
)
def test_bad_scores_are_refused_with_a_clear_message(raw, message):
    with pytest.raises(BadScores, match=message):
        check_scores(raw, 4, 0, "test")


def test_warmup_scores_may_be_anything():
    out = check_scores(np.array([np.nan, -np.inf, 1, 2]), 4, 2, "train")
    assert out.dtype == np.float64 and out[2:].tolist() == [1.0, 2.0]
