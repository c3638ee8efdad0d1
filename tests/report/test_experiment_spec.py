"""The shipped server-machines experiment spec parses, covers the built-in detectors and fails
clearly without a data root."""

from __future__ import annotations

from pathlib import Path

import pytest

from benchkit.cli import main
from benchkit.spec import default_spec, load_spec

SPEC = Path(__file__).resolve().parents[2] / "datasets" / "server-machines-experiment.toml"


def test_spec_runs_every_detector_of_the_default_experiment():
    spec = load_spec(SPEC)
    # the default experiment is documented as "every built-in detector"
    assert {d.name for d in spec.detectors} == {d.name for d in default_spec().detectors}
    assert set(spec.thresholds.strategies) == {"oracle", "pot", "quantile"}
    assert spec.resolve_source(spec.datasets[0].source).endswith("datasets/server-machines.toml")


def test_run_without_data_root_is_one_line_exit_2(monkeypatch, tmp_path, capsys):
    monkeypatch.delenv("BENCHKIT_DATA_ROOT", raising=False)
    assert main(["run", str(SPEC), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchkit: error: ") and err.count("\n") == 1
    assert "BENCHKIT_DATA_ROOT" in err


@pytest.mark.parametrize("flag", ["--data-root", "--spec-dir"])
def test_verify_help_names_data_options(flag, capsys):
    with pytest.raises(SystemExit):
        main(["verify", "--help"])
    assert flag in capsys.readouterr().out
