"""The deep detectors honour the detector contract, their ablation switches change the model,
training and scoring are deterministic and leave torch's global state alone, scoring in chunks
matches scoring at once, and saved models load back exactly.

Data here are invented (``benchkit.testing.make_check_data``), only for behaviour checks.
"""

from __future__ import annotations

import random

import numpy as np
import pytest
import torch

from benchkit import registry
from benchkit.errors import DataError, ParamError
from benchkit.testing import check_detector, make_check_data
from detectors._torch import score_last_points, torch_session
from detectors.factorized_vae import FactorizedVaeDetector
from detectors.lstm_vae import LstmVaeDetector

DEEP = ("factorized-vae", "lstm-vae")
# tiny sizes: every fit takes a fraction of a second
TINY = dict(window=8, hidden_size=8, max_epochs=2, max_train_windows=96, batch_size=32, threads=1)
SIZES = {"factorized-vae": dict(static_size=2, dynamic_size=2), "lstm-vae": dict(latent_size=3)}


def tiny(name: str, **params):
    return registry.create(name, **{**TINY, **SIZES[name], **params})


@pytest.fixture(scope="module")
def series() -> tuple[np.ndarray, np.ndarray]:
    return make_check_data(400, 4, seed=1), make_check_data(300, 4, seed=2)


@pytest.mark.parametrize("name", DEEP)
def test_registered_with_the_declared_interface(name: str) -> None:
    cls = registry.get(name)
    assert name in registry.available()
    ours = ("detectors.lstm_vae", "detectors.factorized_vae", "detectors._torch")
    assert not any(m.startswith(ours) for m in registry.load_errors())
    assert cls.needs_torch is True
    declared = set(cls.schema())
    shared = {"window", "hidden_size", "batch_size", "max_epochs", "patience", "learning_rate",
              "kl_warmup_epochs", "score_samples", "seed", "threads", "progress"}
    assert shared <= declared
    assert cls().warmup == cls().window - 1


@pytest.mark.parametrize("name", DEEP)
@pytest.mark.parametrize("extra", [{}, {"score_samples": 2}])
def test_passes_the_contract_kit(name: str, extra: dict) -> None:
    # reference: benchkit.testing.check_detector (causality, determinism, refit, NaN refusal, ...)
    report = check_detector(tiny(name, **extra), quick=bool(extra))
    assert report.passed
    assert report.status("causality") == "passed"
    assert report.status("persistence") == "passed"  # state dict, weights_only=True load


def test_contract_kit_passes_each_ablation() -> None:
    for params in ({"static_latent": False}, {"prior": "standard"}):
        report = check_detector(tiny("factorized-vae", **params), quick=True)
        assert report.status("determinism") == "passed" and report.passed


def test_each_ablation_switch_changes_the_model(series) -> None:
    train, test = series
    variants = {
        "full": {},
        "no static latent": {"static_latent": False},
        "standard prior": {"prior": "standard"},
    }
    fitted = {k: tiny("factorized-vae", **v).fit(train) for k, v in variants.items()}
    counts = {k: d.parameter_count() for k, d in fitted.items()}
    assert len(set(counts.values())) == 3, counts
    assert counts["full"] > counts["no static latent"]
    assert counts["full"] > counts["standard prior"]
    scores = {k: d.score(test)[TINY["window"] - 1 :] for k, d in fitted.items()}
    for k in ("no static latent", "standard prior"):
        assert not np.allclose(scores[k], scores["full"]), k
    assert not hasattr(fitted["no static latent"].model_, "static_rnn")
    assert not hasattr(fitted["standard prior"].model_, "prior_rnn")


@pytest.mark.parametrize("name", DEEP)
def test_same_seed_same_bits_other_seed_other_scores(name: str, series) -> None:
    train, test = series
    a = tiny(name, seed=3).fit(train).score(test)
    b = tiny(name, seed=3).fit(train).score(test)
    c = tiny(name, seed=4).fit(train).score(test)
    assert np.array_equal(a, b)
    assert not np.allclose(a[7:], c[7:])
    assert np.all(a[:7] == -np.inf) and np.isfinite(a[7:]).all() and a.dtype == np.float64


def test_global_torch_python_and_numpy_state_is_restored(series) -> None:
    train, test = series
    torch.set_num_threads(2)
    torch.use_deterministic_algorithms(False)
    torch.manual_seed(123)
    random.seed(5)
    np.random.seed(6)
    expected = (torch.rand(3), random.random(), np.random.random())
    torch.manual_seed(123)
    random.seed(5)
    np.random.seed(6)
    tiny("factorized-vae", threads=1).fit(train).score(test)
    assert torch.get_num_threads() == 2
    assert not torch.are_deterministic_algorithms_enabled()
    after = (torch.rand(3), random.random(), np.random.random())
    assert torch.equal(after[0], expected[0]) and after[1:] == expected[1:]


def test_session_sets_threads_and_deterministic_mode_inside() -> None:
    torch.set_num_threads(2)
    with torch_session(seed=0, threads=1):
        assert torch.get_num_threads() == 1
        assert torch.are_deterministic_algorithms_enabled()
    with torch_session(seed=0, threads=0):  # 0 keeps the process's setting
        assert torch.get_num_threads() == 2
    assert torch.get_num_threads() == 2


def test_scoring_in_chunks_matches_one_pass() -> None:
    x = make_check_data(300, 3, seed=9)
    window = 6

    def last_point_norm(batch: torch.Tensor) -> torch.Tensor:
        return batch[:, -1].double().square().sum(dim=1)

    small = score_last_points(x, window, last_point_norm, chunk=7)
    whole = score_last_points(x, window, last_point_norm, chunk=10_000)
    # reference: the same quantity straight from numpy, in float32 as the chunks hold it
    direct = np.square(x.astype(np.float32).astype(np.float64)).sum(axis=1)
    np.testing.assert_array_equal(small, whole)
    np.testing.assert_allclose(small[window - 1 :], direct[window - 1 :], rtol=1e-12)
    assert np.all(small[: window - 1] == -np.inf)


@pytest.mark.parametrize("cls", [FactorizedVaeDetector, LstmVaeDetector])
def test_save_and_load_give_the_same_scores(cls, series, tmp_path) -> None:
    train, test = series
    det = tiny(cls.name, score_samples=2).fit(train)
    path = tmp_path / "model.pt"
    det.save(path)
    back = cls.load(path)
    assert back.get_params() == det.get_params()
    np.testing.assert_array_equal(back.score(test), det.score(test))
    assert back.history_.best_epoch == det.history_.best_epoch
    assert [p.name for p in tmp_path.iterdir()] == ["model.pt"]  # no temporary file left


def test_load_refuses_other_files_with_one_clear_line(series, tmp_path) -> None:
    train, _ = series
    saved = tmp_path / "lstm.pt"
    tiny("lstm-vae").fit(train).save(saved)
    with pytest.raises(DataError, match=r"lstm\.pt: holds a 'lstm-vae' model, not 'factorized"):
        FactorizedVaeDetector.load(saved)
    junk = tmp_path / "junk.pt"
    junk.write_bytes(b"not a model")
    with pytest.raises(DataError, match=r"junk\.pt: not a saved benchkit model"):
        LstmVaeDetector.load(junk)
    with pytest.raises(DataError, match=r"missing\.pt: no such file"):
        LstmVaeDetector.load(tmp_path / "missing.pt")
    pickled = tmp_path / "pickled.pt"
    torch.save({"format": object()}, pickled)  # arbitrary objects are never unpickled
    with pytest.raises(DataError, match="not a saved benchkit model"):
        LstmVaeDetector.load(pickled)


def test_window_longer_than_train_is_a_param_error() -> None:
    with pytest.raises(ParamError, match=r"lstm-vae\.window: 8 exceeds the train series"):
        tiny("lstm-vae").fit(make_check_data(5, 2, seed=0))


def test_score_before_fit_and_wrong_channel_count_are_refused(series) -> None:
    train, test = series
    det = tiny("lstm-vae")
    with pytest.raises(RuntimeError, match="call fit"):
        det.score(test)
    det.fit(train)
    with pytest.raises(ValueError, match="expected 4 channels"):
        det.score(test[:, :3])


def test_early_stopping_and_best_weights(series) -> None:
    train, _ = series
    det = tiny("lstm-vae", max_epochs=30, patience=1, kl_warmup_epochs=0, learning_rate=0.05)
    h = det.fit(train).history_
    assert len(h.validation_loss) == len(h.train_loss) <= 30
    assert h.validation_loss[h.best_epoch] == min(h.validation_loss)
    if h.stopped_early:  # stopped one epoch after the best, by the patience of 1
        assert len(h.validation_loss) == h.best_epoch + 2
    assert h.n_validation_windows == 60 - TINY["window"] + 1  # the last 15% of 400 steps
    assert h.stop_reason == ("patience" if h.stopped_early else "max_epochs")
    record = det.training_record()
    assert record["stop_epoch"] == len(h.train_loss) - 1 and record["best_epoch"] == h.best_epoch
    assert record["validation_loss"] == h.validation_loss
    # a budget of 2 epochs inside a 3-epoch KL warm-up can only end at max_epochs
    short = tiny("lstm-vae", max_epochs=2).fit(train).training_record()
    assert (short["stop_reason"], short["stop_epoch"]) == ("max_epochs", 1)


def test_progress_bar_is_silent_off_a_terminal(series, capsys) -> None:
    train, _ = series
    tiny("lstm-vae", progress=True, max_epochs=1).fit(train)
    captured = capsys.readouterr()
    assert captured.out == "" and captured.err == ""
