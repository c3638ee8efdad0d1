"""One tiny real run shared by the report tests (run once per test session)."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

SCRIPT_LABEL = "<script>alert(1)</script>"

# Invented demo data (our own generator), sized to run in seconds: 3 nodes, 6 KPIs, 5 incidents.
TINY_SPEC = f"""
name = "report-tests"
seeds = [0, 1]

[execution]
workers = 2

[thresholds]
strategies = ["oracle", "pot", "quantile", "alert-budget"]

[[datasets]]
source = "demo"
[datasets.options]
n_entities = 3
n_channels = 6
n_train = 600
n_test = 700
incidents = {{ spike = 2, level-shift = 1, variance-burst = 1, flat-line = 1 }}

[[detectors]]
name = "random"

[[detectors]]
name = "step-change"

[[detectors]]
name = "step-change"
label = "{SCRIPT_LABEL}"
[detectors.params]
norm = "max"

[[detectors]]
name = "pca-residual"

[[sweep]]
kind = "multiplicative"
levels = [0, 0.3]
apply_to = "both"
"""


@pytest.fixture(scope="session")
def tiny_run(tmp_path_factory) -> Path:
    """A results folder of the tiny spec, with every report file written by ``write_all``."""
    from benchkit.report import write_all
    from benchkit.runner import run_experiment
    from benchkit.spec import parse_toml

    out = tmp_path_factory.mktemp("report") / "run"
    summary = run_experiment(parse_toml(TINY_SPEC, "tiny spec"), out, quiet=True)
    assert summary.ok, summary.failures
    write_all(out)
    return out


@pytest.fixture()
def run_copy(tiny_run, tmp_path) -> Path:
    """A private copy of the tiny run, for tests that re-run or alter it."""
    target = tmp_path / "copy"
    shutil.copytree(tiny_run, target)
    return target
