"""Per-event metadata in the split-folder layout: interpretation lines, kinds, step length.

The file formats are those the public releases use (see ../shared/data/public/README.md):
``START-END:k1,k2,...`` with KPIs numbered from 1, and ``dataset,anomaly_segment,anomaly_type``.
The small folders here are invented; the expected events are worked out by hand in comments.
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.data import DataError, DataWarning, load, make_demo
from benchkit.data.step import describe_step, parse_step

from .conftest import write_entity

# by hand: runs of 1 at test steps 2-4, 9-9 and 12-17 (inclusive)
LABELS = np.zeros(20, dtype=np.int8)
LABELS[[2, 3, 4, 9, 12, 13, 14, 15, 16, 17]] = 1


@pytest.fixture
def root(tmp_path):
    rng = np.random.default_rng(5)
    root = tmp_path / "fleet"
    write_entity(root, "n1", rng.normal(size=(30, 4)), rng.normal(size=(20, 4)), LABELS)
    return root


def _write(root, text, name="n1"):
    path = root / "interpretation_label" / f"{name}.txt"
    path.parent.mkdir(exist_ok=True)
    path.write_text(text)
    return path


def _load(root, **options):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataWarning)
        entity = load(str(root), **options).entities[0]
    return entity, [str(w.message) for w in caught if w.category is DataWarning]


def test_inclusive_lines_match_events_and_two_lines_unite(root):
    # the second event is written as two partial lines (12-13 and 15-17): their KPIs unite
    _write(root, "2-4:1,3\n9-9:4\n12-13:2\n15-17:3,2\n")
    entity, warned = _load(root)
    assert warned == []
    assert [(e.start, e.end, e.culprits) for e in entity.events] == [
        (2, 4, (0, 2)),
        (9, 9, (3,)),
        (12, 17, (1, 2)),
    ]
    assert entity.has_culprits and not entity.has_kinds


def test_exclusive_end_is_one_past_the_last_index(root):
    # END one past the last index: 2-5 is steps 2..4, 9-10 is step 9; 17-18 still overlaps 12-17
    _write(root, "2-5:1\n9-10:2\n17-18:3\n")
    entity, warned = _load(root, interpretation_end="exclusive")
    assert warned == []
    assert [e.culprits for e in entity.events] == [(0,), (1,), (2,)]
    # read as inclusive, 9-10 is steps 9..10: the event at 9 still matches, by overlap
    entity, _ = _load(root)
    assert [e.culprits for e in entity.events] == [(0,), (1,), (2,)]


def test_orphan_line_and_event_without_line_are_warnings_naming_the_file(root):
    path = _write(root, "2-4:1\n6-7:2\n")
    entity, warned = _load(root)
    assert [e.culprits for e in entity.events] == [(0,), None, None]
    assert any(f"{path}: line 2" in w and "overlap no labelled event" in w for w in warned)
    assert any(str(path) in w and "9-9, 12-17" in w for w in warned)


@pytest.mark.parametrize(
    ("text", "line", "words"),
    [
        ("2-4:1\n9-9:x\n", 2, "KPI 'x' is not a whole number"),
        ("2-4:5\n", 1, "KPI 5 out of range"),
        ("2-4:0\n", 1, "KPI 0 out of range"),
        ("4-2:1\n", 1, "reversed"),
        ("2-4\n", 1, "malformed line"),
        ("2to4:1\n", 1, "malformed range"),
        ("2-4:\n", 1, "no KPI listed"),
        ("12-25:1\n", 1, "goes past the test part's 20 steps"),
    ],
)
def test_bad_interpretation_line_is_a_data_error_naming_file_and_line(root, text, line, words):
    path = _write(root, text)
    with pytest.raises(DataError) as info:
        load(str(root))
    assert f"{path}: line {line}:" in str(info.value)
    assert words in str(info.value)


def test_cli_exits_2_with_one_line_for_a_corrupted_line(root, capsys):
    path = _write(root, "2-4:1\n9-9:1,,2\n")
    assert main(["datasets", "show", str(root)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"{path}: line 2" in err[0] and "Traceback" not in err[0]


def test_empty_range_under_exclusive_end(root):
    path = _write(root, "9-9:1\n")
    with pytest.raises(DataError, match=f"{path}: line 1: range '9-9' is empty"):
        load(str(root), interpretation_end="exclusive")


def test_kinds_from_the_csv_matched_by_overlap(root):
    (root / "anomaly_type.csv").write_text(
        "dataset,anomaly_segment,anomaly_type\n"
        "n1,2-4,metric\n"
        "other,0-3,temporal\n"  # an entity that is not loaded: ignored
        "n1,10-13,temporal\n"  # overlaps only the event at 12-17
    )
    entity, warned = _load(root)
    assert [e.kind for e in entity.events] == ["metric", None, "temporal"]
    assert entity.has_kinds
    assert any("no line for entity 'n1'" in w and "9-9" in w for w in warned)


def test_two_kinds_for_one_event_is_an_error(root):
    path = root / "anomaly_type.csv"
    path.write_text("dataset,anomaly_segment,anomaly_type\nn1,2-3,metric\nn1,4-4,temporal\n")
    with pytest.raises(DataError, match=f"{path}: line 3: kind 'temporal'.*line 2 says 'metric'"):
        load(str(root))


@pytest.mark.parametrize(
    ("text", "words"),
    [
        ("entity,segment,type\nn1,2-4,metric\n", "line 1: expected the header"),
        ("dataset,anomaly_segment,anomaly_type\nn1,2-4\n", "line 2: 2 fields"),
        ("dataset,anomaly_segment,anomaly_type\nn1,4-2,metric\n", "line 2: range '4-2' is rev"),
        ("dataset,anomaly_segment,anomaly_type\nn1,2-40,metric\n", "line 2: range goes past"),
    ],
)
def test_bad_kinds_file_is_a_data_error(root, text, words):
    path = root / "anomaly_type.csv"
    path.write_text(text)
    with pytest.raises(DataError, match=str(path)) as info:
        load(str(root))
    assert words in str(info.value)


def test_metadata_and_step_change_the_fingerprint(root):
    plain = load(str(root)).fingerprint()
    assert load(str(root), step="5min").fingerprint() != plain
    _write(root, "2-4:1\n9-9:2\n12-17:3\n")
    assert load(str(root)).fingerprint() != plain


@pytest.mark.parametrize(
    ("text", "seconds"),
    [("5min", 300.0), ("1min", 60.0), ("30s", 30.0), ("1h", 3600.0), ("1d", 86400.0), (15, 15.0)],
)
def test_step_option(text, seconds):
    # unit sizes: 1 min = 60 s, 1 h = 3600 s, 1 d = 86400 s (SI / common usage)
    assert parse_step("x", text) == seconds
    assert parse_step("x", describe_step(seconds)) == seconds


@pytest.mark.parametrize("bad", ["5 minutes", "-1min", "0s", True, "", "min"])
def test_bad_step_option(root, bad):
    with pytest.raises(DataError, match="option step"):
        load(str(root), step=bad)


def test_bad_end_convention(root):
    with pytest.raises(DataError, match="interpretation_end must be one of"):
        load(str(root), interpretation_end="half-open")


def test_demo_records_culprits_kinds_and_step():
    sizes = {"seed": 2, "n_entities": 2, "n_channels": 8, "n_train": 600, "n_test": 900}
    demo = make_demo(**sizes)
    # the same seed without incidents gives the undisturbed series (the plan is drawn after it)
    clean = make_demo(**sizes, incidents={})
    for entity, calm in zip(demo.entities, clean.entities, strict=True):
        planned = demo.notes["incidents"][entity.name]
        assert [(e.kind, e.start, e.end) for e in entity.events] == planned
        moved = entity.test != calm.test
        expected = np.zeros_like(moved)
        for e in entity.events:
            # each culprit channel differs from the undisturbed one somewhere in its event
            assert moved[e.start : e.end + 1, list(e.culprits)].any(axis=0).all()
            expected[e.start : e.end + 1, list(e.culprits)] = True
        # and nothing moved outside the culprits' events
        assert not (moved & ~expected).any()
        assert entity.step_seconds == 300.0  # the scenario's 5-minute step


def test_table_step_from_datetime_timestamps(tmp_path):
    # 5-minute stamps written as ISO text; pandas (the reference parser) reads them as datetimes
    stamps = pd.date_range("2024-03-01", periods=40, freq="5min")
    frame = pd.DataFrame(
        {"timestamp": stamps.strftime("%Y-%m-%dT%H:%M:%SZ"), "cpu": np.arange(40.0)}
    )
    frame["label"] = (np.arange(40) == 30).astype(int)
    frame.to_csv(tmp_path / "node.csv", index=False)
    assert load(str(tmp_path / "node.csv")).entities[0].step_seconds == 300.0
    frame["timestamp"] = np.arange(40) * 300  # plain numbers: the unit is unknown
    frame.to_csv(tmp_path / "node.csv", index=False)
    assert load(str(tmp_path / "node.csv")).entities[0].step_seconds is None
