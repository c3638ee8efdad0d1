"""export-model then apply on real data: one application-server entity (Li et al., KDD 2021),
its published test file applied as is (a headerless split-folder file).

Reference: the scores and POT threshold that the run cached for the cell (benchkit's protocol),
and the published test file's row count (4,320 per entity, the data's README).
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.store import Store

from .conftest import DATASETS

ENTITY = "omi-1"
pytestmark = pytest.mark.filterwarnings("ignore::benchkit.data.DataWarning")


@pytest.fixture(scope="module")
def public_run(public_data, tmp_path_factory):
    from benchkit.runner import run_experiment
    from benchkit.spec import parse_spec

    spec = parse_spec({
        "name": "deploy-public", "seeds": [0], "execution": {"workers": 1},
        "datasets": [{"source": str(DATASETS / "app-servers.toml"), "entities": [ENTITY]}],
        "detectors": [{"name": "pca-residual"},
                      {"name": "isolation-forest", "params": {"n_estimators": 20}}],
    })  # fmt: skip
    out = tmp_path_factory.mktemp("public") / "run"
    assert run_experiment(spec, out, quiet=True, data_root=public_data).ok
    return out


@pytest.mark.parametrize("variant", ["pca-residual", "isolation-forest"])
def test_bundle_reproduces_the_run_on_the_published_test_file(variant, public_run, public_data,
                                                              tmp_path, capsys):  # fmt: skip
    bundle = tmp_path / "bundle"
    assert main(["export-model", str(public_run), "--variant", variant, "--entity", ENTITY,
                 "--data-root", str(public_data), "--to", str(bundle), "--quiet"]) == 0
    test_file = public_data / "app-servers" / "test" / f"{ENTITY}.txt"
    assert main(["apply", str(bundle), str(test_file)]) == 0
    out = pd.read_csv(io.StringIO(capsys.readouterr().out))
    with Store(public_run) as store:
        cells = store.cells_frame()
        cached = store.load_scores(cells.loc[cells["variant"] == variant, "cell_key"].iloc[0])
    assert len(out) == 4320  # rows per test file (the data's README)
    assert out["score"].to_numpy().tobytes() == cached["test_scores"].tobytes()
    assert out["alert"].sum() == np.count_nonzero(cached["test_scores"] >= cached["threshold_pot"])
