"""A spec that varies hyperparameters of a classical and a torch detector, with two seeds, on the
invented demo: labelled variants, the sensitivity table and plot, the training record (table,
loss plot, export), and the constant-channel rule in the cell key.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.report import write_all
from benchkit.report.training import ROSE_AFTER_BEST, STILL_FALLING, training_flags
from benchkit.runner import expand_grid, load_datasets, run_experiment
from benchkit.spec import parse_toml
from benchkit.store import Store

# Invented demo data (our own generator), tiny sizes; the deep detector trains a few epochs.
SPEC = """
name = "vary-tests"
seeds = [0, 1]

[execution]
workers = 2

[thresholds]
strategies = ["oracle"]

[[datasets]]
source = "demo"
[datasets.options]
n_entities = 2
n_channels = 4
n_train = 600
n_test = 400
incidents = { spike = 2, level-shift = 1 }

[[detectors]]
name = "pca-residual"
[detectors.vary]
statistic = ["q", "t2"]

[[detectors]]
name = "lstm-vae"
label = "lv"
[detectors.params]
hidden_size = 8
latent_size = 2
max_epochs = 3
max_train_windows = 64
batch_size = 32
[detectors.vary]
window = [6, 10]
"""


@pytest.fixture(scope="module")
def varied_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("vary") / "out"
    spec = parse_toml(SPEC, "vary spec")
    summary = run_experiment(spec, out, quiet=True)
    assert summary.ok, summary.failures
    written = write_all(out)
    return spec, out, written


def test_variants_are_labelled_and_run_for_both_seeds(varied_run):
    spec, out, _ = varied_run
    labels = [d.label for d in spec.detectors]
    assert labels == ["pca-residual/statistic=q", "pca-residual/statistic=t2",
                      "lv/window=6", "lv/window=10"]  # fmt: skip
    with Store(out) as store:
        cells = store.cells_frame()
    assert sorted(set(cells["variant"])) == sorted(labels)
    assert cells.groupby("variant")["seed"].nunique().eq(2).all()
    params = cells[cells["variant"] == "lv/window=10"]["params"].iloc[0]
    assert '"window":10' in params


def test_sensitivity_table_and_plot_show_each_value_with_the_spread_over_seeds(varied_run):
    _, out, written = varied_run
    assert written["table:sensitivity"].name == "sensitivity.md"
    assert written["plot:sensitivity"].stat().st_size > 0
    text = written["table:sensitivity"].read_text()
    assert "| lv " in text and "| window " in text and "| statistic " in text
    with Store(out) as store:
        metrics = store.metrics_frame()
    # reference: pandas arithmetic on the raw metrics frame, done here independently
    f1 = metrics[(metrics["metric"] == "f1") & (metrics["threshold"] == "oracle")]
    per_seed = f1[f1["variant"] == "lv/window=6"].groupby("seed")["value"].mean()
    row = f"{per_seed.mean():.3f} ± {per_seed.std(ddof=1):.3f}"
    assert any(line.startswith("| lv ") and "| 6 " in line and row in line
               for line in text.splitlines()), (row, text)  # fmt: skip


def test_training_record_is_stored_tabled_plotted_and_exported(varied_run, tmp_path, capsys):
    _, out, written = varied_run
    with Store(out) as store:
        frame = store.training_frame()
    assert set(frame["variant"]) == {"lv/window=6", "lv/window=10"}  # pca-residual has none
    assert len(frame) == 8  # 2 variants x 2 entities x 2 seeds
    for record in frame["record"]:
        n = len(record["train_loss"])
        assert n == len(record["validation_loss"]) == record["stop_epoch"] + 1 <= 3
        assert record["stop_reason"] in ("patience", "max_epochs")
        if record["stop_reason"] == "max_epochs":
            assert n == 3
        assert record["validation_loss"][record["best_epoch"]] == min(record["validation_loss"])
    assert written["plot:training-loss"].stat().st_size > 0
    assert "| lv/window=6 " in written["table:training"].read_text()
    assert main(["export", str(out), "--format", "csv", "--to", str(tmp_path), "--quiet"]) == 0
    # reference: pandas' own CSV reader
    back = pd.read_csv(tmp_path / "training.csv")
    assert len(back) == sum(len(r["train_loss"]) for r in frame["record"])
    first = frame.iloc[0]
    rows = back[back["cell_key"] == first["cell_key"]].sort_values("epoch")
    np.testing.assert_allclose(rows["validation_loss"], first["record"]["validation_loss"])
    assert set(back["stop_reason"]) <= {"patience", "max_epochs"}
    capsys.readouterr()


def test_training_flags_on_hand_made_records():
    # common practice, no source: the two flags as defined in benchkit.report.training
    assert training_flags({"validation_loss": [5.0, 4.0, 3.0], "stop_reason": "max_epochs"}) == [
        STILL_FALLING
    ]
    assert training_flags({"validation_loss": [5.0, 4.0, 3.0], "stop_reason": "patience"}) == []
    # gained 4 (5 -> 1), rose back by 2 > 0.25 * 4
    assert training_flags({"validation_loss": [5.0, 1.0, 3.0], "stop_reason": "patience"}) == [
        ROSE_AFTER_BEST
    ]
    # rose by 0.5 <= 0.25 * 4: ordinary patience noise
    assert training_flags({"validation_loss": [5.0, 1.0, 1.5], "stop_reason": "patience"}) == []


def test_constant_channels_rule_is_part_of_the_cell_key():
    keys = {}
    for rule in ("keep", "drop", "clip"):
        text = SPEC.replace("seeds = [0, 1]", f'seeds = [0, 1]\nconstant_channels = "{rule}"')
        spec = parse_toml(text, "spec")
        assert spec.constant_channels == rule
        keys[rule] = {c.key for c in expand_grid(spec, load_datasets(spec))}
    assert not keys["keep"] & keys["drop"] and not keys["drop"] & keys["clip"]
