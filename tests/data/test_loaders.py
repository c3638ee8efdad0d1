"""Loaders: round trip through the split-folder export, agreement between formats, options."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.data import Entity, export_split_folder, load, make_demo
from benchkit.data.export import INCIDENTS_FILE

from .conftest import write_entity

REPO = Path(__file__).resolve().parents[2]
SMALL = {"n_entities": 2, "n_channels": 6, "n_train": 600, "n_test": 800}


def _same_arrays(a: Entity, b: Entity) -> None:
    np.testing.assert_array_equal(a.train, b.train)
    np.testing.assert_array_equal(a.test, b.test)
    np.testing.assert_array_equal(a.labels, b.labels)
    assert a.channels == b.channels
    assert a.train.dtype == b.train.dtype == np.float64
    for e in (a, b):
        assert e.train.flags.c_contiguous and e.test.flags.c_contiguous
        assert e.labels.dtype == np.int8


def test_export_demo_then_load_gives_identical_arrays_and_fingerprint(tmp_path, capsys):
    target = tmp_path / "demo-files"
    assert main(["datasets", "export-demo", str(target), "-o", "seed=3", "-q"]) == 0
    # the folder carries culprits and kinds; the step length comes back through the option
    loaded = load(str(target), step="5min")
    demo = make_demo(seed=3)
    assert [e.name for e in loaded.entities] == [e.name for e in demo.entities]
    for a, b in zip(loaded.entities, demo.entities, strict=True):
        _same_arrays(a, b)
        assert a.events == b.events and a.has_culprits and a.has_kinds
        assert a.step_seconds == b.step_seconds == 300.0
        assert a.fingerprint() == b.fingerprint()
    assert loaded.fingerprint() == demo.fingerprint()
    assert capsys.readouterr().out == ""


def test_export_writes_the_incident_list_people_can_read(tmp_path):
    demo = make_demo(seed=1, **SMALL)
    export_split_folder(demo, tmp_path / "out")
    # reference: pandas.read_csv reading our incidents.csv back
    table = pd.read_csv(tmp_path / "out" / INCIDENTS_FILE)
    expected = [
        (entity, kind, start, end)
        for entity, events in demo.notes["incidents"].items()
        for kind, start, end in events
    ]
    got = list(table[["entity", "kind", "start", "end"]].itertuples(index=False, name=None))
    assert got == expected


def test_export_leaves_nothing_when_writing_fails(tmp_path):
    demo = make_demo(**SMALL)
    demo.entities[1].name = "bad/name"  # cannot be a file name: the write fails midway
    with pytest.raises(OSError):
        export_split_folder(demo, tmp_path / "out")
    assert list(tmp_path.iterdir()) == []


def _write_all_formats(tmp_path: Path, train, test, labels, channels) -> dict[str, Path]:
    root = tmp_path / "folder"
    write_entity(root, "node", train, test, labels)
    (root / "channels.txt").write_text("\n".join(channels) + "\n")
    n_train = train.shape[0]
    frame = pd.DataFrame(np.vstack([train, test]), columns=list(channels))
    frame.insert(0, "timestamp", np.arange(frame.shape[0]) * 300)
    frame["label"] = np.concatenate([np.zeros(n_train, dtype=int), labels])
    csv = tmp_path / "node.csv"
    frame.to_csv(csv, index=False)
    parquet = tmp_path / "node.parquet"
    frame.to_parquet(parquet)
    npz = tmp_path / "node.npz"
    np.savez(npz, train=train, test=test, labels=labels, channels=np.array(channels))
    return {"folder": root, "csv": csv, "parquet": parquet, "npz": npz}


def test_the_loaders_agree_on_the_same_data(tmp_path, small_arrays):
    train, test, labels = small_arrays
    channels = ("cpu", "mem", "disk")
    paths = _write_all_formats(tmp_path, train, test, labels, channels)
    split_at = train.shape[0] * 300
    folder = load(str(paths["folder"])).entities[0]
    csv = load(str(paths["csv"]), split_at=split_at).entities[0]
    parquet = load(str(paths["parquet"]), split_at=split_at).entities[0]
    npz = load(str(paths["npz"])).entities[0]
    for other in (csv, parquet, npz):
        _same_arrays(folder, other)
    # the reference values: what we wrote, exactly (repr() text round-trips a float64)
    np.testing.assert_array_equal(folder.train, train)
    assert npz.fingerprint() == folder.fingerprint()
    np.testing.assert_array_equal(csv.train_timestamps, np.arange(train.shape[0]) * 300)
    np.testing.assert_array_equal(csv.train_labels, np.zeros(train.shape[0]))


def test_table_split_by_fraction_floors_the_train_length(tmp_path):
    frame = pd.DataFrame({"a": np.arange(10.0), "label": [0] * 7 + [1] * 3})
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    # floor(10 * 0.35) = 3 train rows; default fraction 0.5 -> 5
    assert load(str(path), train_fraction=0.35).entities[0].train.shape == (3, 1)
    assert load(str(path)).entities[0].test.shape == (5, 1)
    with pytest.raises(Exception, match="train_fraction must be a number in"):
        load(str(path), train_fraction=1.5)


def test_table_split_at_a_timestamp_in_utc(tmp_path):
    stamps = pd.date_range("2024-03-01 00:00", periods=8, freq="5min", tz="Europe/Berlin")
    frame = pd.DataFrame({"when": stamps.strftime("%Y-%m-%dT%H:%M:%S%z"), "x": np.arange(8.0)})
    frame["y"] = [0, 0, 0, 0, 0, 1, 1, 0]
    path = tmp_path / "t.csv"
    frame.to_csv(path, index=False)
    entity = load(
        str(path), timestamp_column="when", label_column="y", split_at="2024-02-29T23:15:00Z"
    ).entities[0]
    # 00:15 Berlin (UTC+1) is 23:15 UTC: three rows before it
    assert entity.train.shape[0] == 3
    # reference: pandas.to_datetime(..., utc=True) without the zone
    expected = pd.to_datetime(frame["when"], utc=True).dt.tz_localize(None).to_numpy()
    np.testing.assert_array_equal(
        np.concatenate([entity.train_timestamps, entity.test_timestamps]), expected
    )
    np.testing.assert_array_equal(entity.labels, [0, 0, 1, 1, 0])


def test_split_folder_entities_in_natural_order(split_root):
    names = [e.name for e in load(str(split_root)).entities]
    assert names == ["m-1-2", "m-1-10"]


def test_split_folder_without_channels_file_numbers_columns(split_root):
    assert load(str(split_root)).entities[0].channels == ("c01", "c02", "c03")


def test_load_demo_accepts_the_demo_options():
    via_load = load("demo", seed=5, incidents={"spike": 1, "drift": 2}, **SMALL)
    direct = make_demo(seed=5, incidents={"spike": 1, "drift": 2}, **SMALL)
    assert via_load.fingerprint() == direct.fingerprint()
    with pytest.raises(Exception, match="demo: unknown option 'n_nodes'"):
        load("demo", n_nodes=3)


def test_demo_toml_matches_make_demo():
    dataset = load(str(REPO / "datasets" / "demo-small.toml"))
    same = make_demo(seed=0, n_entities=2, n_channels=12, n_train=1200, n_test=1500)
    assert dataset.name == "demo-small"
    assert dataset.fingerprint() == same.fingerprint()


def test_toml_table_folder_with_caller_options_overriding(tmp_path):
    data = tmp_path / "tables"
    data.mkdir()
    for k in range(2):
        frame = pd.DataFrame({"cpu": np.arange(10.0) + k, "bad": [0] * 8 + [1, 1]})
        frame.to_csv(data / f"node{k}.csv", index=False)
    toml = tmp_path / "nodes.toml"
    toml.write_text('format = "table"\npath = "tables"\n[options]\nlabel_column = "bad"\n')
    dataset = load(str(toml), train_fraction=0.8)
    assert dataset.name == "nodes"
    assert [e.name for e in dataset.entities] == ["node0", "node1"]
    assert dataset.entities[1].train.shape == (8, 1)
    np.testing.assert_array_equal(dataset.entities[1].labels, [1, 1])


def test_server_machines_toml_reads_the_data_root(tmp_path, split_root, monkeypatch):
    monkeypatch.delenv("BENCHKIT_DATA_ROOT", raising=False)
    split_root.rename(tmp_path / "server-machines")
    toml = REPO / "datasets" / "server-machines.toml"
    dataset = load(str(toml), data_root=str(tmp_path))
    assert dataset.name == "server-machines" and len(dataset.entities) == 2
    monkeypatch.setenv("BENCHKIT_DATA_ROOT", str(tmp_path))
    assert load(str(toml)).fingerprint() == dataset.fingerprint()


def test_cli_show_with_data_root(tmp_path, split_root, capsys):
    split_root.rename(tmp_path / "server-machines")
    toml = REPO / "datasets" / "server-machines.toml"
    assert main(["datasets", "show", str(toml), "--data-root", str(tmp_path)]) == 0
    out = capsys.readouterr().out
    assert "m-1-2" in out and "m-1-10" in out
