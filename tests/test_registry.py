"""The detector registry: built-ins, entry points, module:Class paths, families, validation,
and the ``benchkit detectors`` listing. Expected names and messages come from the contract in
docs/internals.md and issue 4 (the behaviour users rely on), not from the implementation."""

from __future__ import annotations

import pickle
import textwrap
from importlib.metadata import EntryPoint

import numpy as np
import pytest

from benchkit import registry
from benchkit.cli import main
from benchkit.detector import Detector, Param
from benchkit.errors import DetectorNotFound, ParamError

CLASSICAL = (
    "random", "step-change", "isolation-forest", "pca-residual", "correlation-break",
    "shape-clusters", "pyod:ECOD", "pyod:COPOD", "pyod:LOF", "pyod:KNN",
)  # fmt: skip


@pytest.fixture
def fresh_registry(monkeypatch):
    """A registry that runs its loading again (built-ins kept), restored afterwards."""
    registry.available()  # modules import once per process: keep what they registered
    monkeypatch.setattr(registry, "_REGISTRY", dict(registry._REGISTRY))
    monkeypatch.setattr(registry, "_LOAD_ERRORS", {})
    monkeypatch.setattr(registry, "_loaded", False)
    monkeypatch.setattr(registry, "_RESOLVERS", dict(registry._RESOLVERS))
    return registry


@pytest.fixture
def plugin_dir(tmp_path, monkeypatch):
    """A folder on sys.path holding small plug-in modules written by the test."""
    monkeypatch.syspath_prepend(str(tmp_path))

    def write(module: str, body: str) -> str:
        (tmp_path / f"{module}.py").write_text(textwrap.dedent(body))
        return module

    return write


GOOD_PLUGIN = """
    import numpy as np
    from benchkit.detector import Detector, Param

    class Zeros(Detector):
        name = "zeros-plugin"
        description = "all zeros"
        params = (Param("level", float, 0.0, "constant score"),)

        def fit(self, train):
            return self

        def score(self, series):
            return np.full(len(series), self.level)

    class NotADetector:
        name = "nope"
"""


def test_every_classical_builtin_is_available_and_sorted():
    names = registry.available()
    assert names == sorted(names)
    assert set(CLASSICAL) <= set(names)
    for name in CLASSICAL:
        assert registry.get(name).name == name
    assert not {k: v for k, v in registry.load_errors().items() if k.startswith("detectors.")}


def test_create_fills_defaults_and_validates_values():
    det = registry.create("pca-residual", variance=0.5)
    assert det.get_params() == {"variance": 0.5, "n_components": None, "statistic": "q",
                                "alpha": 0.01}  # fmt: skip
    assert isinstance(registry.create("pca-residual", variance=1).variance, float)


@pytest.mark.parametrize(
    "params, message",
    [
        ({"windw": 5}, "detectors[0].params.windw: unknown hyperparameter of 'correlation-break'; "
                       "valid: base_weight, cap, min_spread, reduce, window"),
        ({"window": "30"}, "detectors[0].params.window: expected an integer >= 4, got \"30\""),
        ({"window": 2}, "detectors[0].params.window: expected an integer >= 4, got 2"),
        ({"window": True}, "detectors[0].params.window: expected an integer >= 4, got true"),
        ({"reduce": "sum"}, "detectors[0].params.reduce: expected one of 'channel-max', "
                            "'pair-mean', got \"sum\""),
    ],
)  # fmt: skip
def test_bad_hyperparameters_give_one_clear_error(params, message):
    with pytest.raises(ParamError) as info:
        registry.create("correlation-break", where="detectors[0].params", **params)
    assert str(info.value) == message


def test_unknown_name_lists_the_valid_choices():
    with pytest.raises(DetectorNotFound) as info:
        registry.get("isolation-forrest")
    text = str(info.value)
    assert text.startswith("unknown detector 'isolation-forrest'; available: ")
    assert all(name in text for name in CLASSICAL)


def test_module_class_paths(plugin_dir):
    plugin_dir("bk_plugin_good", GOOD_PLUGIN)
    cls = registry.get("bk_plugin_good:Zeros")
    assert cls.name == "zeros-plugin"
    assert registry.create("bk_plugin_good:Zeros", level=2).level == 2.0
    with pytest.raises(DetectorNotFound, match="not a named benchkit Detector subclass"):
        registry.get("bk_plugin_good:NotADetector")
    with pytest.raises(DetectorNotFound, match="AttributeError"):
        registry.get("bk_plugin_good:Missing")
    plugin_dir("bk_plugin_crash", "raise RuntimeError('cannot start')\n")
    with pytest.raises(DetectorNotFound) as info:
        registry.get("bk_plugin_crash:Thing")
    assert str(info.value) == (
        "cannot load detector 'bk_plugin_crash:Thing': RuntimeError: cannot start"
    )


def test_entry_points_load_and_a_broken_plugin_is_reported_by_name(
    fresh_registry, plugin_dir, monkeypatch
):
    plugin_dir("bk_plugin_good", GOOD_PLUGIN)
    plugin_dir("bk_plugin_bad", "import bk_no_such_dependency\n")
    group = registry.ENTRY_POINT_GROUP
    eps = [
        EntryPoint("zeros", "bk_plugin_good:Zeros", group),
        EntryPoint("broken", "bk_plugin_bad:Thing", group),
        EntryPoint("notdet", "bk_plugin_good:NotADetector", group),
    ]
    monkeypatch.setattr(registry, "entry_points", lambda group: eps)
    with pytest.warns(UserWarning) as record:
        names = registry.available()
    warned = " | ".join(str(w.message) for w in record)
    assert "detector plug-in entry point broken (bk_plugin_bad:Thing) failed to load" in warned
    assert "entry point notdet (bk_plugin_good:NotADetector) failed to load" in warned
    assert "zeros-plugin" in names and "pca-residual" in names
    errors = registry.load_errors()
    broken = errors["entry point broken (bk_plugin_bad:Thing)"]
    assert broken == "ModuleNotFoundError: No module named 'bk_no_such_dependency'"
    notdet = errors["entry point notdet (bk_plugin_good:NotADetector)"]
    assert "not a named benchkit Detector" in notdet


def test_entry_point_cannot_take_a_builtin_name(fresh_registry, plugin_dir, monkeypatch):
    plugin_dir("bk_plugin_clash", """
        from detectors.baselines import StepChange

        class Impostor(StepChange):
            pass
    """)
    eps = [EntryPoint("clash", "bk_plugin_clash:Impostor", registry.ENTRY_POINT_GROUP)]
    monkeypatch.setattr(registry, "entry_points", lambda group: eps)
    with pytest.warns(UserWarning):
        assert registry.get("step-change").__name__ == "StepChange"
    assert "already taken by detectors.baselines.StepChange" in (
        registry.load_errors()["entry point clash (bk_plugin_clash:Impostor)"]
    )


def test_a_broken_builtin_module_does_not_take_the_others_down(
    fresh_registry, plugin_dir, monkeypatch
):
    for module, name in (("bk_builtin_a", "first-builtin"), ("bk_builtin_b", "second-builtin")):
        plugin_dir(module, f"""
            from benchkit.detector import Detector
            from benchkit.registry import register

            @register
            class Builtin(Detector):
                name = "{name}"
        """)
    plugin_dir("bk_broken_builtin", "raise ValueError('half-written module')\n")
    modules = ("bk_builtin_a", "bk_broken_builtin", "bk_builtin_b", "bk_not_written_yet")
    monkeypatch.setattr(registry, "BUILTIN_MODULES", modules)
    monkeypatch.setattr(registry, "entry_points", lambda group: [])
    with pytest.warns(UserWarning, match="bk_broken_builtin failed to load"):
        names = registry.available()
    assert {"first-builtin", "second-builtin"} <= set(names)
    # a module that does not exist (not written yet) is not a plug-in failure
    assert registry.load_errors() == {"bk_broken_builtin": "ValueError: half-written module"}


def test_register_refuses_nameless_and_duplicate_classes(fresh_registry):
    class Nameless(Detector):
        pass

    class First(Detector):
        name = "dup-name"

    class Second(Detector):
        name = "dup-name"

    with pytest.raises(TypeError, match="declares no name"):
        registry.register(Nameless)
    registry.register(First)
    assert registry.register(First) is First  # re-registering the same class is harmless
    with pytest.raises(TypeError, match="registered twice"):
        registry.register(Second)


def test_pyod_family_builds_other_models_on_demand():
    cls = registry.get("pyod:IForest")
    assert registry.get("pyod:IForest") is cls
    schema = cls.schema()
    # the constructor of pyod.models.iforest.IForest declares these, with these defaults
    assert schema["n_estimators"].default == 100 and schema["bootstrap"].default is False
    assert "contamination" not in schema and "random_state" not in schema
    with pytest.raises(ParamError, match='expected an integer, got "many"'):
        registry.create("pyod:IForest", n_estimators="many")
    with pytest.raises(DetectorNotFound, match="no class 'NoSuchModel' in pyod.models.nosuchmodel"):
        registry.get("pyod:NoSuchModel")


def test_family_detectors_pickle_by_name():
    rng = np.random.default_rng(0)
    train, test = rng.normal(size=(300, 3)), rng.normal(size=(120, 3))
    det = registry.create("pyod:IForest", n_estimators=20).fit(train)
    clone = pickle.loads(pickle.dumps(det))
    assert type(clone) is type(det)
    assert np.array_equal(clone.score(test), det.score(test))


def test_cli_lists_every_detector_with_defaults(capsys):
    assert main(["detectors"]) == 0
    out = capsys.readouterr().out
    for name in CLASSICAL:
        assert name in out
    assert "window=30" in out and "norm='l2'" in out


def test_cli_shows_one_detector(capsys):
    assert main(["detectors", "show", "pca-residual"]) == 0
    out = capsys.readouterr().out
    assert out.startswith("pca-residual: ")
    assert "threshold hint: yes" in out
    row = next(line for line in out.splitlines() if line.startswith("variance"))
    assert "a number in [0.01, 1.0]" in row and "0.9" in row


def test_cli_unknown_detector_is_one_line_exit_2(capsys):
    assert main(["detectors", "show", "nope"]) == 2
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("benchkit: error: unknown detector 'nope'")
    assert captured.out == ""


def test_param_schema_is_the_single_declaration_read_by_validation():
    # common practice (scikit-learn's estimator contract): the declared schema drives validation
    class Tiny(Detector):
        name = "tiny"
        params = (Param("k", int, 3, "k", low=1, high=5),)

    assert Tiny.validate_params({}) == {"k": 3}
    with pytest.raises(ParamError, match=r"x\.k: expected an integer in \[1, 5\], got 6"):
        Tiny.validate_params({"k": 6}, "x")
