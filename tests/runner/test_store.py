"""The results store: schema as documented in docs/internals.md, atomic writes, SQLite WAL."""

import re
import sqlite3
from pathlib import Path

import numpy as np
import pytest

from benchkit.errors import BenchkitInputError
from benchkit.store import CellRecord, Store

INTERNALS = Path(__file__).resolve().parents[2] / "docs" / "internals.md"


def _documented_columns(method: str) -> list[str]:
    """The column list docs/internals.md gives for ``Store.<method>()`` (the report's contract)."""
    text = " ".join(INTERNALS.read_text(encoding="utf-8").split())
    match = re.search(rf"`Store\.{method}\(\)` -> [^`]*`([^`]+)`", text)
    assert match, f"docs/internals.md does not document Store.{method}()"
    return [c.strip() for c in match.group(1).split(",")]


def _record(key: str, status: str = "ok", error: str | None = None) -> CellRecord:
    return CellRecord(
        cell_key=key,
        detector="random",
        params='{"seed":0}',
        dataset="demo",
        entity="node-1",
        entity_fingerprint="f" * 64,
        seed=0,
        perturbation="none",
        noise_kind="none",
        noise_level=0.0,
        noise_apply="both",
        scaling="zscore",
        protocol_version=1,
        status=status,
        error=error,
        measures={
            "fit_seconds": 0.5,
            "score_seconds": 0.25,
            "points_per_second": 400.0,
            "peak_memory_mb": 3.0,
            "n_train": 10,
            "n_test": 100,
            "warmup": 0,
        },
        evaluation="e1",
    )


def _store_with_one_cell(tmp_path):
    store = Store(tmp_path / "out", create=True)
    run_id = store.begin_run(
        "t",
        "name = 't'\n",
        {"name": "t"},
        {"python": "3"},
        {("demo", "node-1"): "f" * 64},
        [("k1", "random"), ("k2", "random")],
    )
    scores = {
        "test_scores": np.linspace(0, 1, 100),
        "train_scores": np.arange(10.0),
        "labels": (np.arange(100) > 90).astype(np.int8),
        "warmup": np.array(0),
    }
    metrics = {("oracle", "f1"): 0.5, ("pot", "f1"): float("nan"), ("none", "roc_auc"): 0.75}
    store.write_cell(_record("k1"), run_id, scores, metrics, {"threshold_pot": 0.9})
    store.write_cell(_record("k2", "failed", "ValueError: boom"), run_id, None, {}, {})
    return store, run_id, scores


def test_frames_have_the_documented_columns_and_values(tmp_path):
    store, run_id, _ = _store_with_one_cell(tmp_path)
    m = store.metrics_frame()
    assert list(m.columns) == _documented_columns("metrics_frame")
    assert sorted(zip(m.threshold, m.metric, strict=True)) == [
        ("none", "roc_auc"),
        ("oracle", "f1"),
        ("pot", "f1"),
    ]
    assert m.set_index(["threshold", "metric"]).loc[("oracle", "f1"), "value"] == 0.5
    assert np.isnan(m.set_index(["threshold", "metric"]).loc[("pot", "f1"), "value"])
    c = store.cells_frame(run_id)
    assert list(c.columns) == _documented_columns("cells_frame")
    assert dict(zip(c.cell_key, c.status, strict=True)) == {"k1": "ok", "k2": "failed"}
    assert c.set_index("cell_key").loc["k2", "error"] == "ValueError: boom"
    assert store.completed() == {"k1": "e1"}  # the failed cell is not done


def test_scores_round_trip_and_latest_run(tmp_path):
    store, run_id, scores = _store_with_one_cell(tmp_path)
    back = store.load_scores("k1")
    np.testing.assert_array_equal(back["test_scores"], scores["test_scores"])
    np.testing.assert_array_equal(back["labels"], scores["labels"])
    assert back["warmup"] == 0 and back["threshold_pot"] == 0.9
    run = store.latest_run()
    assert run["run_id"] == run_id and run["spec"] == {"name": "t"}
    assert run["fingerprints"] == {"demo/node-1": "f" * 64}
    with pytest.raises(BenchkitInputError, match="no cached scores"):
        store.load_scores("k2")


def test_reevaluation_replaces_metrics_without_duplicates(tmp_path):
    store, _, _ = _store_with_one_cell(tmp_path)
    store.write_evaluation("k1", "e2", {("oracle", "f1"): 0.6}, {"threshold_pot": 1.0})
    m = store.metrics_frame()
    assert m[["threshold", "metric", "value"]].values.tolist() == [["oracle", "f1", 0.6]]
    assert store.completed() == {"k1": "e2"}


def test_database_is_sqlite_in_wal_mode_and_missing_folder_is_an_input_error(tmp_path):
    _store_with_one_cell(tmp_path)
    # reference: SQLite's own answer to PRAGMA journal_mode
    with sqlite3.connect(tmp_path / "out" / "results.sqlite") as conn:
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    with pytest.raises(BenchkitInputError, match=r"nowhere: no results.sqlite"):
        Store(tmp_path / "nowhere")
    assert not (tmp_path / "nowhere").exists()


def test_partial_score_files_are_removed(tmp_path):
    store, _, _ = _store_with_one_cell(tmp_path)
    leftover = store.scores_dir / "abc.npz.tmp123"
    leftover.write_bytes(b"half")
    assert store.remove_partial_files() == 1
    assert not leftover.exists() and store.score_path("k1").exists()


def test_a_results_folder_from_before_attribution_timing_gets_the_column(tmp_path):
    # common practice, no source: an old database is upgraded in place, old rows read NULL
    store, run_id, _ = _store_with_one_cell(tmp_path)
    store._conn.execute("ALTER TABLE cells DROP COLUMN attribute_seconds")
    store.close()
    with Store(tmp_path / "out") as again:
        frame = again.cells_frame(run_id)
        assert "attribute_seconds" in frame.columns
        assert frame["attribute_seconds"].isna().all()
