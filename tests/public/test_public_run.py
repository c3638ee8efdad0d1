"""A reduced public experiment end to end: every built-in detector on two entities of each
release, then ``benchkit verify`` on its own scorecard; and the committed results/public."""

from __future__ import annotations

import importlib.util
import json
import tomllib

import pytest

from benchkit.cli import main
from benchkit.data.split_folder import entity_names
from benchkit.report.scorecard import compute_digest
from benchkit.spec import default_spec

from .conftest import DATASETS, REPO


def builtin_names() -> set[str]:
    """The built-in detectors: those the default spec lists (checked against docs/internals.md
    in tests/runner/test_spec.py)."""
    return {d.name for d in default_spec().detectors}


PUBLIC_SPEC = DATASETS / "public-experiment.toml"
COMMITTED = REPO / "results" / "public" / "scorecard.json"
# A smaller training budget for the two deep detectors keeps this test short (every built-in
# still runs); the committed results use the defaults.
DEEP_BUDGET = {"max_epochs": 2, "max_train_windows": 256}


def _reduced_spec(public_data) -> str:
    """public-experiment.toml with two entities per dataset, absolute dataset paths and a small
    deep budget; everything else as committed."""
    text = PUBLIC_SPEC.read_text(encoding="utf-8")
    for toml, folder in (
        ("server-machines.toml", "server-machines"),
        ("app-servers.toml", "app-servers"),
    ):
        two = entity_names(public_data / folder)[:2]
        text = text.replace(
            f'source = "{toml}"\n',
            f'source = "{DATASETS / toml}"\nentities = {json.dumps(two)}\n',
        )
    for deep in ("lstm-vae", "factorized-vae"):
        params = ", ".join(f"{k} = {v}" for k, v in DEEP_BUDGET.items())
        text = text.replace(f'name = "{deep}"\n', f'name = "{deep}"\nparams = {{ {params} }}\n')
    return text


def test_public_experiment_lists_every_builtin_on_both_datasets_without_entities():
    spec = tomllib.loads(PUBLIC_SPEC.read_text(encoding="utf-8"))
    assert {d["source"] for d in spec["datasets"]} == {"server-machines.toml", "app-servers.toml"}
    assert all("entities" not in d for d in spec["datasets"])
    assert {d["name"] for d in spec["detectors"]} == builtin_names()
    # issue: "with oracle, POT and quantile thresholds" (others may join them)
    assert {"oracle", "pot", "quantile"} <= set(spec["thresholds"]["strategies"])


def test_reduced_public_run_then_verify(public_data, tmp_path, capsys):
    spec = tmp_path / "public-reduced.toml"
    spec.write_text(_reduced_spec(public_data), encoding="utf-8")
    out = tmp_path / "run"
    root = str(public_data)
    assert main(["run", str(spec), "--out", str(out), "--data-root", root, "--quiet"]) == 0
    card = json.loads((out / "scorecard.json").read_text(encoding="utf-8"))
    cells = card["cells"].values()
    # 2 entities x 2 datasets x every built-in, one seed, no sweep; every cell ok
    assert len(cells) == 4 * len(builtin_names())
    assert {c["status"] for c in cells} == {"ok"}
    assert {c["dataset"] for c in cells} == {"server-machines", "app-servers"}
    assert main(["verify", str(out / "scorecard.json"), "--data-root", root]) == 0
    assert capsys.readouterr().out.splitlines()[-1].startswith("reproduced: all")


@pytest.mark.skipif(not COMMITTED.is_file(), reason=f"{COMMITTED} is not committed yet")
def test_committed_public_scorecard_digest_is_valid():
    # cheap: the digest and the content agree (benchkit verify re-runs it in full)
    card = json.loads(COMMITTED.read_text(encoding="utf-8"))
    assert card["digest"] == compute_digest(card)
    cells = card["cells"].values()
    assert {c["status"] for c in cells} == {"ok"}
    assert {c["dataset"] for c in cells} == {"server-machines", "app-servers"}
    assert {c["detector"] for c in cells} == builtin_names()


@pytest.mark.skipif(not COMMITTED.is_file(), reason=f"{COMMITTED} is not committed yet")
def test_readme_section_matches_the_committed_tables():
    # the README's public-results block is what benchmarks/public_run.py writes from the
    # committed per-dataset POT tables and the scorecard's entities (no hand-edited numbers)
    module_spec = importlib.util.spec_from_file_location(
        "public_run", REPO / "benchmarks" / "public_run.py"
    )
    public_run = importlib.util.module_from_spec(module_spec)
    module_spec.loader.exec_module(public_run)
    card = json.loads(COMMITTED.read_text(encoding="utf-8"))
    entities: dict[str, set] = {}
    for cell in card["cells"].values():
        entities.setdefault(cell["dataset"], set()).add(cell["entity"])
    folder = COMMITTED.parent / "tables" / "by-dataset"
    texts = {
        d: {"pot": (folder / f"{d}-comparison-pot.md").read_text(encoding="utf-8")}
        for d in sorted(entities)
    }
    block = public_run.readme_block(texts, {d: sorted(e) for d, e in entities.items()})
    assert block in (REPO / "README.md").read_text(encoding="utf-8")
