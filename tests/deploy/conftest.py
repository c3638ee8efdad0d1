"""One tiny run shared by the export/apply tests (invented demo data, run once per session)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from runner.helpers import TINY_DEMO

TORCH_PARAMS = {"window": 6, "hidden_size": 4, "max_epochs": 1, "max_train_windows": 32}
DEMO = {**TINY_DEMO, "n_entities": 1, "n_train": 600, "n_test": 300}
ENTITY = "pay-gw-01"


@pytest.fixture(scope="session")
def tiny_run(tmp_path_factory) -> Path:
    """A results folder: PCA (npz state), isolation forest (refit state), an LSTM-VAE (torch
    state dict), the random baseline (position-dependent) and a plug-in without save/load."""
    from benchkit.runner import run_experiment
    from benchkit.spec import parse_spec

    spec = parse_spec({
        "name": "deploy-tests",
        "seeds": [0],
        "execution": {"workers": 1},
        "thresholds": {"strategies": ["oracle", "pot", "quantile", "alert-budget"]},
        "datasets": [{"source": "demo", "options": DEMO}],
        "detectors": [
            {"name": "pca-residual"},
            {"name": "isolation-forest", "params": {"n_estimators": 10}},
            {"name": "lstm-vae", "params": TORCH_PARAMS},
            {"name": "random"},
            {"name": "runner.plugins:Echo", "label": "echo"},
        ],
    })
    out = tmp_path_factory.mktemp("deploy") / "run"
    summary = run_experiment(spec, out, quiet=True)
    assert summary.ok, summary.failures
    return out


@pytest.fixture(scope="session")
def test_part(tiny_run, tmp_path_factory) -> Path:
    """The entity's raw test part as a headerless comma-separated file (a split-folder file)."""
    from benchkit.data import load

    entity = load("demo", **DEMO).entity(ENTITY)
    path = tmp_path_factory.mktemp("data") / "test.txt"
    np.savetxt(path, entity.test, delimiter=",", fmt="%.17g")
    return path


@pytest.fixture(scope="session")
def bundles(tiny_run, tmp_path_factory) -> dict[str, Path]:
    """One POT bundle per exportable variant (exported once)."""
    from benchkit.deploy.export import export_model

    root = tmp_path_factory.mktemp("bundles")
    return {
        v: export_model(tiny_run, v, ENTITY, root / v)
        for v in ("pca-residual", "isolation-forest", "lstm-vae", "random")
    }
