"""Experiment specs: every error names its key path; specs round-trip through TOML."""

import tomllib

import pytest

from benchkit.cli import main
from benchkit.errors import SpecError
from benchkit.noise import CLEAN, make_perturbation
from benchkit.spec import (
    default_spec,
    default_spec_text,
    load_spec,
    metric_options,
    parse_spec,
    parse_toml,
    vary_variants,
)

MINIMAL = {
    "name": "t",
    "datasets": [{"source": "demo", "options": {"n_entities": 1}}],
    "detectors": [
        {"name": "random"},
        {"name": "runner.plugins:Windowed", "label": "w"},
        {"name": "runner.plugins:Windowed", "label": "w16", "params": {"window": 16}},
    ],
}


def _with(**changes):
    data = {k: (list(v) if isinstance(v, list) else v) for k, v in MINIMAL.items()}
    data["detectors"] = [dict(d) for d in MINIMAL["detectors"]]
    data.update(changes)
    return data


def test_default_spec_names_every_built_in_detector_and_round_trips():
    spec = default_spec()
    # reference: the built-in names listed in docs/internals.md
    documented = {
        "random",
        "step-change",
        "isolation-forest",
        "pca-residual",
        "correlation-break",
        "shape-clusters",
        "pyod:ECOD",
        "pyod:COPOD",
        "pyod:LOF",
        "pyod:KNN",
        "lstm-vae",
        "factorized-vae",
    }
    assert {d.name for d in spec.detectors} == documented
    assert set(spec.thresholds.strategies) == {"oracle", "pot", "quantile", "alert-budget"}
    assert spec.seeds == (0, 1)  # two seeds: seed spread for verify across platforms
    assert [p.key() for p in spec.perturbations] == [
        "none",
        "multiplicative:0.1:both",
        "multiplicative:0.3:both",
    ]
    assert parse_spec(spec.to_dict()) == spec
    # reference: tomllib reads our TOML writer's text back to the same data
    assert tomllib.loads(spec.to_toml()) == spec.to_dict()
    assert parse_toml(default_spec_text(), "x") == spec


def test_variants_resolve_defaults_and_sweeps_expand():
    spec = parse_spec(
        _with(
            sweep=[
                {"kind": "additive", "levels": [0, 0.5], "apply_to": "test"},
                {"kind": "multiplicative", "levels": [0.0, 0.2]},
            ]
        )
    )
    w, w16 = spec.detectors[1], spec.detectors[2]
    assert (w.label, w.resolved["window"], w.params) == ("w", 8, {})
    assert w16.resolved["window"] == 16 and w16.takes_seed
    assert spec.perturbations == (
        CLEAN,
        make_perturbation("additive", 0.5, "test"),
        make_perturbation("multiplicative", 0.2, "both"),
    )
    assert parse_spec(spec.to_dict()) == spec


def test_vary_expands_into_labelled_variants_and_round_trips():
    spec = parse_spec(_with(detectors=[
        {"name": "random"},
        {"name": "runner.plugins:Windowed", "label": "w", "vary": {"window": [4, 16]}},
    ]))
    variants = spec.detectors[1:]
    assert [d.label for d in variants] == ["w/window=4", "w/window=16"]
    assert [d.resolved["window"] for d in variants] == [4, 16]
    assert all(d.base == "w" and d.params == {} for d in variants)
    assert spec.to_dict()["detectors"][1] == {
        "name": "runner.plugins:Windowed", "label": "w", "vary": {"window": [4, 16]}
    }
    assert parse_spec(spec.to_dict()) == spec
    # reference: tomllib reads our TOML writer's text back to the same data
    assert tomllib.loads(spec.to_toml()) == spec.to_dict()
    assert spec.constant_channels == "keep"


def test_vary_over_two_keys_is_their_product_in_the_order_written():
    # reference: itertools.product order (the first key varies slowest)
    assert vary_variants("lstm-vae", {"window": [16, 32], "learning_rate": [0.001, 0.01]}) == [
        ("lstm-vae/window=16,learning_rate=0.001", {"window": 16, "learning_rate": 0.001}),
        ("lstm-vae/window=16,learning_rate=0.01", {"window": 16, "learning_rate": 0.01}),
        ("lstm-vae/window=32,learning_rate=0.001", {"window": 32, "learning_rate": 0.001}),
        ("lstm-vae/window=32,learning_rate=0.01", {"window": 32, "learning_rate": 0.01}),
    ]
    assert vary_variants("f", {"static_latent": [True, False]})[1][0] == "f/static_latent=false"


def test_metric_options_reach_metric_options():
    spec = parse_spec(_with(metrics={"pa_k": [10, 30], "delay": 5, "range_bias": "front"}))
    options = metric_options(spec.metrics)
    assert (options.pa_k, options.delay, options.range_bias) == ((10, 30), 5, "front")
    assert parse_spec(spec.to_dict()) == spec


@pytest.mark.parametrize(
    ("changes", "message"),
    [
        (
            {
                "detectors": [
                    {"name": "runner.plugins:Windowed"},
                    {"name": "random"},
                    {"name": "runner.plugins:Windowed", "label": "b", "params": {"window": "ten"}},
                ]
            },
            'detectors[2].params.window: expected an integer >= 2, got "ten"',
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "params": {"windw": 3}}]},
            "detectors[0].params.windw: unknown hyperparameter",
        ),
        ({"detectors": [{"name": "no-such-detector"}]}, "detectors[0].name: unknown detector"),
        (
            {"detectors": [{"name": "random", "params": {"seed": 3}}]},
            "detectors[0].params.seed: set by the experiment's seeds list",
        ),
        (
            {
                "detectors": [
                    {"name": "random"},
                    {"name": "runner.plugins:Windowed", "label": "random"},
                ]
            },
            'detectors[1].label: "random" is already used by detectors[0]',
        ),
        (
            {
                "detectors": [
                    {"name": "runner.plugins:Windowed"},
                    {"name": "runner.plugins:Windowed", "label": "b", "params": {"window": 8}},
                ]
            },
            "detectors[1]: same detector and parameters as detectors[0]",
        ),
        ({"detectors": [{"name": "random", "colour": "red"}]}, "detectors[0].colour: unknown key"),
        ({"colour": "red"}, "colour: unknown key; valid here: name,"),
        ({"seeds": [1, 1]}, "seeds: lists a seed twice"),
        ({"seeds": ["a"]}, 'seeds[0]: expected an integer >= 0, got "a"'),
        ({"scaling": "robust"}, 'scaling: expected one of zscore, minmax, none, got "robust"'),
        ({"execution": {"workers": -1}}, "execution.workers: expected an integer >= 0, got -1"),
        ({"execution": {"cell_time_limit": 0}}, "execution.cell_time_limit: expected a number > 0"),
        ({"execution": {"executor": "slurm"}}, "execution.executor: expected one of local, dask"),
        ({"thresholds": {"pot_rsik": 0.1}}, "thresholds.pot_rsik: unknown key"),
        ({"thresholds": {"pot_risk": 0.05}}, "thresholds.pot_risk: expected a number below"),
        (
            {"thresholds": {"strategies": ["oracle", "best"]}},
            "thresholds.strategies[1]: expected one of oracle, pot, quantile, alert-budget, "
            'got "best"',
        ),
        (
            {"thresholds": {"quantile_level": 1.5}},
            "thresholds.quantile_level: expected a number in (0, 1)",
        ),
        ({"metrics": {"no_such_option": 1}}, "metrics.no_such_option: unknown key"),
        ({"metrics": {"pa_k": "20"}}, 'metrics.pa_k: expected a list, got "20"'),
        ({"metrics": {"pa_k": [5, 200]}}, "metrics.pa_k: 200 is not an integer from 0 to 100"),
        ({"metrics": {"delay": 2.5}}, "metrics.delay: expected an integer, got 2.5"),
        ({"datasets": []}, "datasets: expected at least one [[datasets]] table"),
        ({"datasets": [{"options": {}}]}, "datasets[0].source: missing (required)"),
        (
            {"datasets": [{"source": "demo", "entities": "node"}]},
            "datasets[0].entities: expected a list",
        ),
        (
            {"sweep": [{"kind": "additive", "levels": [0.2, 0.1]}]},
            "sweep[0].levels: expected an increasing list of numbers >= 0",
        ),
        ({"sweep": [{"kind": "gaussian", "levels": [0.1]}]}, "sweep[0].kind: expected one of"),
        (
            {"sweep": [{"kind": "additive", "levels": [0.1], "apply_to": "all"}]},
            "sweep[0].apply_to",
        ),
        ({"sweep": [{"kind": "additive", "levels": [-0.1]}]}, "sweep[0].levels"),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "vary": {"windw": [3]}}]},
            "detectors[0].vary.windw: unknown hyperparameter",
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "vary": {"window": [4, 1]}}]},
            "detectors[0].vary.window[1]: expected an integer >= 2, got 1",
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "vary": {"window": []}}]},
            "detectors[0].vary.window: expected a non-empty list of values, got []",
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "vary": {"window": 4}}]},
            "detectors[0].vary.window: expected a non-empty list of values, got 4",
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "params": {"window": 4},
                            "vary": {"window": [4, 8]}}]},
            "detectors[0].vary.window: also set in detectors[0].params",
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "vary": {"window": [4, 4]}}]},
            "detectors[0].vary.window: lists a value twice: [4, 4]",
        ),
        (
            {"detectors": [{"name": "random", "vary": {"seed": [1, 2]}}]},
            "detectors[0].vary.seed: set by the experiment's seeds list",
        ),
        (
            {"detectors": [{"name": "runner.plugins:Windowed", "vary": [4]}]},
            "detectors[0].vary: expected a table, got [4]",
        ),
        (
            {"detectors": [
                {"name": "runner.plugins:Windowed", "label": "w", "vary": {"window": [4, 16]}},
                {"name": "random", "label": "w/window=4"},
            ]},
            'detectors[1].label: "w/window=4" is already used by detectors[0]',
        ),
        (
            {"constant_channels": "zero"},
            'constant_channels: expected one of keep, drop, clip, got "zero"',
        ),
    ],
)
def test_errors_start_with_the_key_path(changes, message):
    data = _with(**changes)
    with pytest.raises(SpecError) as info:
        parse_spec(data)
    assert str(info.value).startswith(message), str(info.value)
    assert "\n" not in str(info.value)


def test_missing_datasets_and_bad_toml_name_the_problem(tmp_path):
    data = _with()
    del data["datasets"]
    with pytest.raises(SpecError, match=r"^datasets: missing"):
        parse_spec(data)
    bad = tmp_path / "bad.toml"
    bad.write_text("name = 't'\n[[detectors]\n")
    with pytest.raises(SpecError, match=r"bad.toml: not valid TOML"):
        load_spec(bad)
    with pytest.raises(SpecError, match=r"missing.toml: no such spec file"):
        load_spec(tmp_path / "missing.toml")


def _cli(capsys, *args):
    """The ``benchkit`` command in this process: (exit status, stdout, stderr)."""
    status = main(list(args))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_cli_bad_spec_is_one_line_exit_2_and_writes_nothing(tmp_path, capsys):
    spec = tmp_path / "bad.toml"
    spec.write_text(
        'name = "t"\n[[datasets]]\nsource = "demo"\n'
        '[[detectors]]\nname = "runner.plugins:Windowed"\n[detectors.params]\nwindow = "ten"\n'
    )
    status, out, err = _cli(capsys, "run", str(spec), "--out", str(tmp_path / "out"))
    assert status == 2 and out == ""
    # the file first, then the key path inside it
    assert err.splitlines() == [
        f'benchkit: error: {spec}: detectors[0].params.window: expected an integer >= 2, got "ten"'
    ]
    assert not (tmp_path / "out").exists()
    status, _, err = _cli(capsys, "run", "--workers", "0")
    assert status == 2 and err == 'benchkit: error: --workers: expected an integer >= 1, got "0"\n'


def test_cli_prints_the_default_spec(capsys):
    status, out, _ = _cli(capsys, "run", "--print-default")
    assert status == 0 and out == default_spec_text()
    assert parse_toml(out, "printed") == default_spec()


def test_the_commented_settings_in_the_default_spec_are_valid_and_are_the_defaults():
    # common practice: documentation that is executable cannot drift from the code it documents
    import re

    text = default_spec_text()
    lines = []
    for line in text.splitlines():
        m = re.match(r"^# (\[[\w.]+\]|\w+ = \S.*?)(\s+#.*)?$", line)
        lines.append(m.group(1) if m else line)
    uncommented = parse_toml("\n".join(lines), "uncommented default")
    assert uncommented.metrics and uncommented.datasets[0].options
    from benchkit.data.demo import make_demo
    from benchkit.metrics import MetricOptions

    # the values shown are the real defaults, so uncommenting them changes nothing
    assert MetricOptions(**uncommented.metrics) == MetricOptions()
    sizes = uncommented.datasets[0].options
    demo = make_demo()
    assert (len(demo.entities), *demo.entities[0].train.shape[::-1], len(demo.entities[0].test)) \
        == (sizes["n_entities"], sizes["n_channels"], sizes["n_train"], sizes["n_test"])
