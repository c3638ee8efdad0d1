"""The notebook API (``benchkit.run``, ``benchkit.open_results``, ``Results``) and the
distribution name.

Checks against outside references: scikit-learn's ``f1_score`` for the cached scores and
thresholds, pandas group-bys written here for the comparison table, the demo generator's labels,
and the CLI's own output for "the API does what the CLI does". The README example is extracted
from README.md and executed as written.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
import tomllib
from importlib.metadata import PackageNotFoundError, distribution
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from sklearn.metrics import f1_score

import benchkit
from benchkit.cli import main as cli_main
from benchkit.data import load
from benchkit.spec import dumps_toml
from benchkit.store import writer_lock

REPO = Path(__file__).resolve().parents[1]
DEMO = {"n_entities": 2, "n_channels": 4, "n_train": 600, "n_test": 500,
        "incidents": {"spike": 2, "level-shift": 1}}
SPEC = {
    "name": "notebook-tests",
    "seeds": [0, 1],
    "execution": {"workers": 2},
    "datasets": [{"source": "demo", "options": DEMO}],
    "detectors": [{"name": "random"}, {"name": "pca-residual"}],
}
TIDY = ("variant", "detector", "entity", "seed", "perturbation", "threshold", "metric", "value")


@pytest.fixture(scope="module")
def results(tmp_path_factory) -> benchkit.Results:
    return benchkit.run(SPEC, out=tmp_path_factory.mktemp("nb") / "run")


def test_readme_example_runs_as_written(tmp_path, monkeypatch):
    text = (REPO / "README.md").read_text(encoding="utf-8")
    section = text.split("\n## From a notebook\n", 1)[1].split("\n## ", 1)[0]
    blocks = re.findall(r"```python\n(.*?)```", section, flags=re.S)
    assert len(blocks) == 1, "the notebook section shows one python example"
    monkeypatch.chdir(tmp_path)
    scope: dict = {}
    exec(compile(blocks[0], "README.md (From a notebook)", "exec"), scope)
    out = tmp_path / "results" / "runs" / "notebook-demo"
    assert scope["results"].out == Path("results/runs/notebook-demo")
    assert (out / "report.html").is_file()
    assert scope["report_page"].resolve() == out / "report.html"
    assert list(scope["table"].index) == ["pca-residual", "step-change", "random"]
    assert {"f1_mean", "pa_f1_mean", "roc_auc_mean", "pa_margin"} <= set(scope["table"].columns)
    assert scope["per_entity"].shape == (2, 3)  # two demo nodes x three detectors
    assert scope["alerts"].shape == scope["cell"]["labels"].shape
    assert set(scope["timings"]["status"]) == {"ok"}
    pd.testing.assert_frame_equal(scope["again"].metrics, scope["metrics"])


def test_metrics_frame_is_tidy(results):
    metrics, cells = results.metrics, results.cells
    assert set(TIDY) <= set(metrics.columns)
    assert not metrics.duplicated(["cell_key", "threshold", "metric"]).any()
    # 2 detectors x 2 entities x 2 seeds, clean data only
    assert len(cells) == 8 and set(cells["status"]) == {"ok"}
    assert set(metrics["cell_key"]) == set(cells["cell_key"])
    assert {"oracle", "pot", "quantile", "none"} == set(metrics["threshold"])
    assert set(metrics["perturbation"]) == {"none"}
    f1 = metrics.loc[metrics["metric"] == "f1", "value"]
    assert f1.between(0, 1).all()  # F1 is a ratio in [0, 1] (its definition)


def test_cells_frame_has_status_timings_and_memory(results):
    cells = results.cells
    for column in ("status", "error", "fit_seconds", "score_seconds", "peak_memory_mb"):
        assert column in cells.columns
    assert (cells["fit_seconds"] >= 0).all() and (cells["peak_memory_mb"] > 0).all()


def test_table_matches_an_independent_groupby(results):
    metrics = results.metrics
    table = results.table(metric="f1", threshold="pot")
    # the table note's definition: mean over entities per seed, then mean and std over seeds
    sel = metrics[(metrics.metric == "f1") & (metrics.threshold == "pot")]
    per_seed = sel.groupby(["variant", "seed"])["value"].mean().unstack("seed")
    for variant, row in per_seed.iterrows():
        assert table.at[variant, "f1_mean"] == pytest.approx(row.mean(), abs=1e-12)
        assert table.at[variant, "f1_std"] == pytest.approx(row.std(ddof=1), abs=1e-12)
    assert table.index[-1] == "random"  # the reference comes last
    several = results.table(metric=["f1", "roc_auc"])  # default strategy: oracle, first present
    assert {"f1_mean", "roc_auc_mean"} <= set(several.columns)
    assert "pa_f1_mean" not in several.columns
    assert set(results.table().columns) >= {"f1_mean", "range_f1_mean", "pr_auc_mean"}


def test_scores_give_back_what_the_metrics_were_computed_from(results):
    cell = results.scores("pca-residual", "pay-gw-02", seed=1)
    labels = load("demo", **DEMO).entities[1].labels  # the demo generator's own labels
    np.testing.assert_array_equal(cell["labels"], labels)
    assert cell["test_scores"].shape == labels.shape
    row = results.metrics.query(
        "variant == 'pca-residual' and entity == 'pay-gw-02' and seed == 1 and metric == 'f1'"
    ).set_index("threshold")["value"]
    # reference: sklearn.metrics.f1_score on "score >= threshold" (our threshold convention)
    for strategy, key in (("oracle", "threshold_oracle_f1"), ("pot", "threshold_pot"),
                          ("quantile", "threshold_quantile")):
        predicted = cell["test_scores"] >= cell[key]
        assert row[strategy] == pytest.approx(f1_score(labels, predicted, zero_division=0.0))


@pytest.mark.parametrize("kwargs, message", [
    ({"variant": "nope", "entity": "pay-gw-01", "seed": 0}, "variant: no cell with variant 'nope'"),
    ({"variant": "random", "entity": "node-9", "seed": 0}, "there are: pay-gw-01, pay-gw-02"),
    ({"variant": "random", "entity": "pay-gw-01"},
     "seed: 2 cells match; give seed (one of [0, 1])"),
])
def test_scores_of_no_or_several_cells_name_the_choices(results, kwargs, message):
    with pytest.raises(benchkit.DataError, match=re.escape(message)):
        results.scores(**kwargs)


def test_table_with_an_unknown_metric_or_strategy_raises(results):
    with pytest.raises(benchkit.DataError, match="no metric 'nope'"):
        results.table(metric="nope")
    with pytest.raises(benchkit.DataError, match="no 'median' results"):
        results.table(threshold="median")


def test_report_writes_the_report_files(results):
    written = results.report(fmt="plain", metric="roc_auc")
    assert written["html"] == results.out / "report.html" and written["html"].is_file()
    assert written["table:timing"].suffix == ".txt"
    scorecard = json.loads(written["scorecard"].read_text(encoding="utf-8"))
    assert len(scorecard["cells"]) == 8


def test_the_api_and_the_cli_give_identical_results(results, tmp_path, capsys):
    """One code path: the CLI on the same spec (as a file) writes the same cells and metrics."""
    spec_file = tmp_path / "spec.toml"
    spec_file.write_text(dumps_toml(SPEC), encoding="utf-8")
    assert cli_main(["run", str(spec_file), "--out", str(tmp_path / "cli"), "--quiet"]) == 0
    capsys.readouterr()
    by_cli = benchkit.open_results(tmp_path / "cli")
    pd.testing.assert_frame_equal(by_cli.metrics, results.metrics)  # bit for bit, same keys
    assert sorted(p.name for p in (tmp_path / "cli").iterdir()) == sorted(
        p.name for p in results.out.iterdir())
    # the spec as TOML text and as a path reach the same validated spec as the dict
    text = spec_file.read_text(encoding="utf-8")
    assert benchkit.notebook.as_spec(text) == benchkit.notebook.as_spec(SPEC)
    assert benchkit.notebook.as_spec(spec_file) == benchkit.notebook.as_spec(str(spec_file))


def test_a_rerun_into_the_same_folder_reuses_every_cell(results):
    again = benchkit.run(SPEC, out=results.out)
    assert again.summary.n_cached == 8 and again.summary.n_computed == 0


@pytest.mark.parametrize("spec, message", [
    ({**SPEC, "seeds": "zero"}, "seeds"),
    ({**SPEC, "detectors": [{"name": "no-such-detector"}]}, "detectors[0]"),
    ('name = "x"\n[[datasets]]\nsource = "demo"\nbogus = 1\n', "datasets[0]"),
    ("missing-spec.toml", "missing-spec.toml: no such spec file"),
    (42, "spec: expected a path, TOML text or a dict, got int"),
])
def test_a_bad_spec_raises_spec_error_and_writes_nothing(tmp_path, spec, message):
    out = tmp_path / "never"
    with pytest.raises(benchkit.SpecError, match=re.escape(message)):
        benchkit.run(spec, out=out)
    assert not out.exists()


def test_bad_data_raises_data_error_and_writes_nothing(tmp_path):
    spec = {**SPEC, "datasets": [{"source": str(tmp_path / "absent.csv")}]}
    with pytest.raises(benchkit.DataError, match="absent.csv"):
        benchkit.run(spec, out=tmp_path / "never")
    assert not (tmp_path / "never").exists()


def test_open_results_of_a_folder_without_results_raises(tmp_path):
    with pytest.raises(benchkit.DataError, match="not a benchkit results folder"):
        benchkit.open_results(tmp_path)


def test_a_folder_another_command_is_writing_raises_data_error(tmp_path):
    with writer_lock(tmp_path / "busy"), pytest.raises(
        benchkit.DataError, match="another benchkit command is writing"
    ):
        benchkit.run(SPEC, out=tmp_path / "busy")


def test_importing_benchkit_loads_no_heavy_library():
    code = ("import sys, benchkit; heavy = ('pandas', 'numpy', 'torch', 'sklearn', 'scipy'); "
            "print([m for m in heavy if m in sys.modules], 'open_results' in dir(benchkit))")
    shown = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                           check=True).stdout.strip()
    assert shown == "[] True"  # the API loads on first use (benchkit.__getattr__)
    assert benchkit.open_results is benchkit.notebook.open_results


def test_the_distribution_has_our_own_name_and_the_usual_entry_points():
    project = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    assert project["name"] == benchkit.DISTRIBUTION != "benchkit"
    try:  # installed by scripts/setup under that name
        dist = distribution(benchkit.DISTRIBUTION)
    except PackageNotFoundError:
        pytest.fail(f"{benchkit.DISTRIBUTION} is not installed: run ./scripts/setup again")
    assert dist.version == benchkit.__version__
    scripts = {e.name: e.value for e in dist.entry_points if e.group == "console_scripts"}
    assert scripts == {"benchkit": "benchkit.cli:main"}
    assert "benchkit.detectors" in project["entry-points"]
