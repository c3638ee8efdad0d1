"""export-model refuses data that differ from the run's, and apply names culprit KPIs of alerts
where the detector attributes (a plug-in here; the check is against its own definition)."""

from __future__ import annotations

import io

import numpy as np
import pandas as pd

from benchkit.cli import main
from benchkit.runner import run_experiment
from benchkit.spec import parse_spec

KPIS = ("latency_ms", "errors_per_s", "queue_depth")


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
