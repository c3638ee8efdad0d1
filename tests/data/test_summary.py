"""Labels-to-events helper and the ``benchkit datasets show`` summary."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from benchkit.cli import main
from benchkit.data import Dataset, Entity, labels_to_events
from benchkit.data.demo import DEFAULT_COUNTS, INCIDENT_KINDS
from benchkit.data.model import Event
from benchkit.data.summary import COLUMNS, kind_counts, summary_rows


def test_events_worked_example():
    # worked example, computed by hand: runs of 1 at 1-2, 5, 7-9 (inclusive)
    labels = np.array([0, 1, 1, 0, 0, 1, 0, 1, 1, 1])
    np.testing.assert_array_equal(labels_to_events(labels), [[1, 2], [5, 5], [7, 9]])
    empty = labels_to_events(np.zeros(5, dtype=np.int8))
    assert empty.shape == (0, 2) and empty.dtype == np.int64
    np.testing.assert_array_equal(labels_to_events(np.ones(4)), [[0, 3]])


def test_events_match_scipy_ndimage_label():
    # reference: scipy.ndimage.label / find_objects, which find connected runs of nonzero values
    rng = np.random.default_rng(3)
    labels = (rng.random(5000) < 0.3).astype(np.int8)
    _, count = ndimage.label(labels)
    slices = ndimage.find_objects(ndimage.label(labels)[0])
    expected = np.array([(s[0].start, s[0].stop - 1) for s in slices])
    events = labels_to_events(labels)
    assert events.shape == (count, 2)
    np.testing.assert_array_equal(events, expected)


def _entity(name: str, labels) -> Entity:
    labels = np.asarray(labels, dtype=np.int8)
    return Entity(name, np.zeros((6, 2)), np.zeros((labels.size, 2)), labels, ("a", "b"))


def test_summary_rows_by_hand():
    ds = Dataset("t", [_entity("x", [0, 1, 1, 0, 1, 1, 1, 1, 0, 0]), _entity("y", [0] * 4)])
    x, y, total = summary_rows(ds)
    # by hand: x has 6 of 10 labelled steps, events of length 2 and 4
    assert x == {
        "entity": "x",
        "train": 6,
        "test": 10,
        "channels": 2,
        "anomaly %": pytest.approx(60.0),
        "events": 2,
        "event len min": 2,
        "median": 3.0,
        "max": 4,
        "step": "-",
        "with culprits": 0,
        "median culprits": None,
    }
    assert y["events"] == 0 and y["event len min"] is None and y["anomaly %"] == 0.0
    # all: 6 of 14 labelled steps, train 12
    assert total["entity"] == "all" and total["train"] == 12 and total["test"] == 14
    assert total["anomaly %"] == pytest.approx(100 * 6 / 14) and total["events"] == 2


def test_cli_show_demo_prints_the_table(capsys):
    assert main(["datasets", "show", "demo"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("dataset demo")
    header = out[1].split()
    for word in ("entity", "train", "test", "channels", "anomaly", "events", "median", "max"):
        assert word in header
    body = [line.split() for line in out[3 : out.index("")]]
    assert [row[0] for row in body] == ["pay-gw-01", "pay-gw-02", "pay-gw-03", "all"]
    assert all(row[1:4] == ["3000", "2500", "16"] for row in body[:3])
    assert len(COLUMNS) == 12 and all(len(row) == 12 for row in body[:4])
    # the demo records its step (5 minutes) and the channels each incident touched
    assert all(row[4] == "5min" and row[6] == row[10] == "7" for row in body[:3])
    kinds = out[out.index("") + 1 :]
    assert kinds[0].split()[3:] == sorted(INCIDENT_KINDS)
    # default incidents per node: two spikes and one of each other kind (demo docstring)
    assert kinds[-1].split() == [
        "all",
        *(str(3 * DEFAULT_COUNTS[k]) for k in sorted(INCIDENT_KINDS)),
    ]


def test_summary_metadata_by_hand():
    labels = np.array([0, 1, 1, 0, 1, 0, 1, 1, 1, 0], dtype=np.int8)
    events = (
        Event(1, 2, (0, 1), "metric"),
        Event(4, 4, None, "temporal"),
        Event(6, 8, (1,), "metric"),
    )
    x = Entity(
        "x",
        np.zeros((6, 2)),
        np.zeros((10, 2)),
        labels,
        ("a", "b"),
        events=events,
        step_seconds=60.0,
    )
    y = _entity("y", [0, 1, 0])
    rows = summary_rows(Dataset("t", [x, y]))
    # by hand: two of x's three events list culprits, of 2 and 1 KPIs (median 1.5)
    assert rows[0]["step"] == "1min" and rows[1]["step"] == "-" and rows[2]["step"] == "mixed"
    assert (rows[0]["with culprits"], rows[0]["median culprits"]) == (2, 1.5)
    assert (rows[2]["with culprits"], rows[2]["median culprits"]) == (2, 1.5)
    assert kind_counts(Dataset("t", [x, y])) == {"x": {"metric": 2, "temporal": 1}, "y": {}}
