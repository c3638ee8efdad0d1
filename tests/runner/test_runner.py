"""The runner end to end on tiny specs: cells, cache, re-evaluation, rescore, export, failures."""

import sqlite3

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from sklearn.metrics import f1_score

from benchkit.cli import main
from benchkit.data import load
from benchkit.runner import run_experiment
from benchkit.spec import parse_spec
from benchkit.store import Store

from .helpers import TINY_DEMO, tiny_spec, write_spec

BASIC = [
    {"name": "random"},
    {"name": "step-change"},
    {"name": "runner.plugins:Echo", "label": "echo", "params": {"window": 3}},
]
SWEEP = [{"kind": "additive", "levels": [0, 0.5], "apply_to": "both"}]


def _frame(out):
    with Store(out) as store:
        return store.metrics_frame().drop(columns="cell_key")


@pytest.fixture(scope="module")
def first_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("run") / "out"
    spec = tiny_spec(BASIC, seeds=[0, 1], sweep=SWEEP)
    summary = run_experiment(spec, out, workers=2, quiet=True)
    return spec, out, summary


def test_every_cell_is_computed_once_and_described(first_run):
    spec, out, summary = first_run
    assert (summary.n_cells, summary.n_computed, summary.n_failed) == (24, 24, 0)  # 2x3x2x2
    with Store(out) as store:
        cells = store.cells_frame()
        metrics = store.metrics_frame()
        run = store.latest_run()
    assert len(cells) == 24 and set(cells.status) == {"ok"} and cells.cell_key.is_unique
    assert set(cells.perturbation) == {"none", "additive:0.5:both"}
    assert set(cells.variant) == {"random", "step-change", "echo"}
    assert set(metrics.threshold) == {"oracle", "pot", "quantile", "none"}
    assert not metrics.duplicated(["cell_key", "threshold", "metric"]).any()
    assert run["spec"] == spec.to_dict()
    # reference: Entity.fingerprint() of the same demo data, loaded independently
    demo = load("demo", **TINY_DEMO)
    assert run["fingerprints"] == {f"demo/{e.name}": e.fingerprint() for e in demo.entities}
    assert run["environment"]["packages"]["numpy"] == np.__version__


def test_a_rerun_reuses_every_cell(first_run):
    spec, out, _ = first_run
    before = _frame(out)
    again = run_experiment(spec, out, workers=2, quiet=True)
    assert (again.n_cached, again.n_computed, again.n_rescored) == (24, 0, 0)
    pd.testing.assert_frame_equal(_frame(out), before)


def test_a_fresh_run_with_one_worker_gives_identical_metrics(first_run, tmp_path):
    spec, out, _ = first_run
    run_experiment(spec, tmp_path / "again", workers=1, quiet=True)
    pd.testing.assert_frame_equal(_frame(tmp_path / "again"), _frame(out))


def test_changed_threshold_settings_are_recomputed_from_cached_scores(first_run):
    spec, out, _ = first_run
    data = spec.to_dict()
    data["thresholds"]["quantile_level"] = 0.95
    with Store(out) as store:
        key = store.cells_frame().cell_key.iloc[0]
        computed_in = store.cell(key)["run_id"]
    summary = run_experiment(parse_spec(data), out, workers=2, quiet=True)
    assert (summary.n_rescored, summary.n_computed) == (24, 0)
    with Store(out) as store:
        assert store.cell(key)["run_id"] == computed_in  # the detector did not run again
        s = store.load_scores(key)
        m = store.metrics_frame().set_index(["cell_key", "threshold", "metric"])["value"]
    # reference: numpy.quantile of the calibration scores, sklearn.metrics.f1_score
    calibration = s["train_scores"][s["warmup"] :]
    theta = np.quantile(calibration[np.isfinite(calibration)], 0.95)
    assert s["threshold_quantile"] == pytest.approx(theta)
    expected = f1_score(s["labels"], s["test_scores"] >= theta)
    assert m[(key, "quantile", "f1")] == pytest.approx(expected)
    run_experiment(spec, out, workers=2, quiet=True)  # back to the module's settings


def test_rescore_restores_tampered_metrics(first_run, capsys):
    _, out, _ = first_run
    before = _frame(out)
    with sqlite3.connect(out / "results.sqlite") as conn:
        conn.execute("UPDATE metrics SET value = -1 WHERE threshold = 'pot'")
    assert (_frame(out)["value"] == -1).any()
    assert main(["rescore", str(out), "--workers", "2"]) == 0
    assert "24 cells re-evaluated" in capsys.readouterr().out
    pd.testing.assert_frame_equal(_frame(out), before)


def test_export_writes_tables_that_read_back(first_run, tmp_path, capsys):
    _, out, _ = first_run
    with Store(out) as store:
        metrics, cells = store.metrics_frame(), store.cells_frame()
    assert main(["export", str(out), "--format", "csv", "--to", str(tmp_path / "csv")]) == 0
    # reference: pandas' own CSV reader and pyarrow's Parquet reader
    back = pd.read_csv(tmp_path / "csv" / "metrics.csv")
    np.testing.assert_allclose(
        back["value"].to_numpy(), metrics["value"].to_numpy(), equal_nan=True
    )
    assert list(back.columns) == list(metrics.columns)
    assert main(["export", str(out), "--format", "parquet", "--to", str(tmp_path / "pq")]) == 0
    table = pq.read_table(tmp_path / "pq" / "cells.parquet").to_pandas()
    pd.testing.assert_frame_equal(table, cells)
    assert sorted(p.name for p in (tmp_path / "pq").iterdir()) == [
        "cells.parquet",
        "metrics.parquet",
        "training.parquet",  # empty: no detector of this run trains epoch by epoch
    ]
    assert pq.read_table(tmp_path / "pq" / "training.parquet").num_rows == 0
    capsys.readouterr()


def test_failing_plug_ins_fail_only_their_cells(tmp_path, capsys):
    detectors = [
        {"name": "random"},
        {"name": "runner.plugins:Raising", "label": "raising"},
        {"name": "runner.plugins:NaNScores", "label": "nan"},
        {"name": "runner.plugins:WrongLength", "label": "short"},
        {"name": "runner.plugins:Sleepy", "label": "sleepy", "params": {"pause": 5.0}},
        {"name": "runner.plugins:Crashing", "label": "crashing"},
        {"name": "runner.plugins:Stuck", "label": "stuck"},
    ]
    spec = write_spec(tmp_path / "spec.toml", detectors, execution={"cell_time_limit": 1.0})
    out = tmp_path / "out"
    status = main(["run", str(spec), "--out", str(out), "--workers", "2", "--quiet"])
    captured = capsys.readouterr()
    assert status == 3
    with Store(out) as store:
        cells = store.cells_frame().set_index(["variant", "entity"])
    by_variant = cells.groupby(level=0)
    assert by_variant["status"].agg(set).to_dict() == {
        "random": {"ok"},
        "raising": {"failed"},
        "nan": {"failed"},
        "short": {"failed"},
        "sleepy": {"timeout"},
        "crashing": {"failed"},
        "stuck": {"timeout"},
    }
    errors = by_variant["error"].first()
    assert errors["raising"].startswith("RuntimeError: plug-in bug on purpose")
    assert "non-finite score(s)" in errors["nan"]
    assert "train: scores of shape (599,); expected (600,)" in errors["short"]
    assert errors["sleepy"] == "cell ran past its time limit of 1 s"
    assert errors["crashing"] == "worker process died (exit code 9)"
    assert "its worker process was killed" in errors["stuck"]
    assert "14 cells: 2 computed" in captured.out and "random" in captured.out
    assert any(line.startswith("failed: raising on demo/") for line in captured.err.splitlines())


def test_local_and_dask_executors_give_identical_metrics_and_time_limits(tmp_path):
    detectors = [
        *BASIC,
        {"name": "pca-residual"},
        {"name": "runner.plugins:Sleepy", "label": "sleepy", "params": {"pause": 60.0}},
    ]
    spec = tiny_spec(
        detectors,
        execution={"cell_time_limit": 5.0},
        sweep=[{"kind": "multiplicative", "levels": [0, 0.2]}],
    )
    local = run_experiment(spec, tmp_path / "local", workers=2, quiet=True)
    dask = run_experiment(spec, tmp_path / "dask", executor="dask", workers=2, quiet=True)
    for summary in (local, dask):
        assert (summary.n_computed, summary.n_timeout, summary.n_failed) == (16, 4, 0)
        assert {f[0] for f in summary.failures} == {"sleepy"}
    pd.testing.assert_frame_equal(_frame(tmp_path / "dask"), _frame(tmp_path / "local"))


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["--executor", "dask", "--scheduler", "nonsense"], "--scheduler nonsense: cannot connect"),
        (["--workers", "two"], '--workers: expected an integer >= 1, got "two"'),
    ],
)
def test_bad_run_options_are_one_line_and_write_nothing(tmp_path, capsys, extra, message):
    spec = write_spec(tmp_path / "spec.toml", [{"name": "random"}])
    status = main(["run", str(spec), "--out", str(tmp_path / "out"), "--quiet", *extra])
    err = capsys.readouterr().err
    assert status == 2 and err.startswith(f"benchkit: error: {message}") and err.count("\n") == 1
    assert not (tmp_path / "out").exists()


def test_an_unrelated_out_folder_is_refused(tmp_path, capsys):
    spec = write_spec(tmp_path / "spec.toml", [{"name": "random"}])
    (tmp_path / "mine").mkdir()
    (tmp_path / "mine" / "notes.txt").write_text("keep me")
    assert main(["run", str(spec), "--out", str(tmp_path / "mine"), "--quiet"]) == 2
    assert "holds no benchkit results" in capsys.readouterr().err
    assert sorted(p.name for p in (tmp_path / "mine").iterdir()) == ["notes.txt"]


def test_dataset_files_relative_to_the_spec_and_data_root(tmp_path, capsys, monkeypatch):
    # invented data for a sanity check: one demo entity written as an .npz under a data root
    entity = load("demo", **TINY_DEMO).entities[0]
    root = tmp_path / "root"
    root.mkdir()
    np.savez(root / "node.npz", train=entity.train, test=entity.test, labels=entity.labels)
    (tmp_path / "specs").mkdir()
    (tmp_path / "specs" / "node.toml").write_text(
        'format = "npz"\npath = "{data_root}/node.npz"\n', encoding="utf-8"
    )
    spec = tmp_path / "specs" / "run.toml"
    spec.write_text(
        'name = "t"\n[[datasets]]\nsource = "node.toml"\n[[detectors]]\nname = "random"\n',
        encoding="utf-8",
    )
    monkeypatch.delenv("BENCHKIT_DATA_ROOT", raising=False)
    out = tmp_path / "out"
    assert main(["run", str(spec), "--out", str(out), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchkit: error: datasets[0]: ") and "--data-root" in err
    assert not out.exists()
    assert main(["run", str(spec), "--out", str(out), "--quiet", "--data-root", str(root)]) == 0
    with Store(out) as store:
        run = store.latest_run()
    assert run["fingerprints"] == {
        "node/node": load(str(root / "node.npz")).entities[0].fingerprint()
    }
    capsys.readouterr()
