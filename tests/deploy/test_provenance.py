"""export-model refuses data that differ from the run's, and apply names culprit KPIs of alerts
where the detector attributes (a plug-in here; the check is against its own definition)."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.runner import run_experiment
from benchkit.spec import parse_spec
from benchkit.store import Store

KPIS = ("latency_ms", "errors_per_s", "queue_depth")
pytestmark = pytest.mark.filterwarnings("ignore::benchkit.data.DataWarning")


def _table_run(tmp_path):
    rng = np.random.default_rng(2)
    n = 400
    values = rng.normal(size=(n, 3))
    values[300, 1] += 40.0  # one test incident on errors_per_s
    labels = np.zeros(n, dtype=int)
    labels[300] = 1
    table = tmp_path / "gateway.csv"
    pd.DataFrame(values, columns=KPIS).assign(label=labels).to_csv(table, index=False)
    spec = parse_spec({
        "name": "table", "seeds": [0], "execution": {"workers": 1},
        "datasets": [{"source": str(table), "name": "gw", "options": {"train_fraction": 0.5}}],
        "detectors": [{"name": "deploy.plugins:DistanceWithCulprits", "label": "dist"}],
    })  # fmt: skip
    assert run_experiment(spec, tmp_path / "run", quiet=True).ok
    return table, values


def test_culprits_are_listed_for_alerts_and_export_refuses_changed_data(tmp_path, capsys):
    table, values = _table_run(tmp_path)
    entity = "gateway"
    bundle = tmp_path / "b"
    argv = ["export-model", str(tmp_path / "run"), "--variant", "dist", "--entity", entity,
            "--to", str(bundle), "--quiet"]  # fmt: skip
    assert main(argv) == 0, capsys.readouterr().err
    data = tmp_path / "test.txt"
    np.savetxt(data, values[200:], delimiter=",", fmt="%.17g")
    assert main(["apply", str(bundle), str(data), "--culprits", "2"]) == 0
    out = pd.read_csv(io.StringIO(capsys.readouterr().out), keep_default_na=False)
    assert list(out.columns) == ["step", "score", "threshold", "alert", "culprits"]
    alert = out[out["step"] == 100].iloc[0]
    assert alert["alert"] == 1
    # the plug-in's attribution is |x - mean| per KPI: errors_per_s dominates by construction
    assert alert["culprits"].split(";")[0] == "errors_per_s"
    assert len(alert["culprits"].split(";")) == 2
    assert (out.loc[out["alert"] == 0, "culprits"] == "").all()
    # the data file changes after the run: the refit would not be the measured detector
    changed = pd.read_csv(table)
    changed.loc[10, "latency_ms"] += 1.0
    changed.to_csv(table, index=False)
    again = tmp_path / "b2"
    assert main([*argv[:-3], "--to", str(again)]) == 2
    err = capsys.readouterr().err
    assert "the data differ from those the run measured" in err and not again.exists()


@pytest.mark.parametrize("mode", ["drop", "clip"])
def test_constant_channel_rules_travel_with_the_bundle(mode, tmp_path, capsys, monkeypatch):
    # a KPI constant over train that moves in test (as on the public server machines)
    rng = np.random.default_rng(8)
    values = rng.normal(size=(400, 3))
    values[:200, 2] = 5.0
    values[260:270, 2] = 9.0
    values[300, 0] += 30.0
    labels = np.zeros(400, dtype=int)
    labels[300] = 1
    table = tmp_path / "gateway.csv"
    pd.DataFrame(values, columns=KPIS).assign(label=labels).to_csv(table, index=False)
    spec = parse_spec({
        "name": "rule", "seeds": [0], "execution": {"workers": 1}, "constant_channels": mode,
        "datasets": [{"source": str(table), "name": "gw", "options": {"train_fraction": 0.5}}],
        "detectors": [{"name": "deploy.plugins:DistanceWithCulprits", "label": "dist"}],
    })  # fmt: skip
    assert run_experiment(spec, tmp_path / "run", quiet=True).ok
    bundle = tmp_path / "b"
    assert main(["export-model", str(tmp_path / "run"), "--variant", "dist", "--entity",
                 "gateway", "--to", str(bundle), "--quiet"]) == 0  # fmt: skip
    data = tmp_path / "test.txt"
    np.savetxt(data, values[200:], delimiter=",", fmt="%.17g")
    assert main(["apply", str(bundle), str(data)]) == 0
    batch = capsys.readouterr().out
    out = pd.read_csv(io.StringIO(batch), keep_default_na=False)
    with Store(tmp_path / "run") as store:
        cached = store.load_scores(store.cells_frame()["cell_key"].iloc[0])
    # reference: the scores the run cached under the same rule (benchkit's protocol)
    assert out["score"].to_numpy().tobytes() == cached["test_scores"].tobytes()
    if mode == "drop":  # the dropped KPI is never named as a culprit
        assert "queue_depth" not in ";".join(out["culprits"])
    monkeypatch.setattr("sys.stdin", io.StringIO(data.read_text()))
    assert main(["apply", str(bundle), "-", "--follow", "--update", "fixed"]) == 0
    follow = pd.read_csv(io.StringIO(capsys.readouterr().out), keep_default_na=False)
    assert np.allclose(follow["score"], out["score"], rtol=1e-12, atol=0)
