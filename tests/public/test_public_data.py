"""The loaders on the public data, checked against the facts its README lists
(../shared/data/public/README.md) and against a plain parse of the release files written here."""

from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main

from .conftest import DATASETS

# README, "Facts measured on these files": test-label events (maximal runs of 1) per entity
EVENTS = {
    "machine-1-6": 30,
    "machine-1-7": 13,
    "machine-2-1": 13,
    "machine-2-2": 11,
    "machine-3-3": 26,
    "omi-1": 7,
    "omi-2": 4,
    "omi-3": 6,
    "omi-4": 5,
    "omi-5": 6,
    "omi-6": 10,
    "omi-7": 3,
    "omi-8": 5,
}
KINDS = {"metric", "temporal", "metric-temporal"}  # README: the app-server event types


def _lines(path):
    """``START-END:k1,...`` lines as (start, end as written, KPIs from 1)."""
    out = []
    for text in path.read_text().split():
        span, kpis = text.split(":")
        start, end = (int(v) for v in span.split("-"))
        out.append((start, end, {int(k) for k in kpis.split(",")}))
    return out


def _event_ids(labels):
    """Per test step: the number of its labelled event (1, 2, ...), 0 where unlabelled."""
    labels = np.asarray(labels, dtype=np.int64)
    starts = np.diff(np.concatenate(([0], labels))) == 1
    return np.cumsum(starts) * labels


def _culprits_by_mask(labels, lines, exclusive):
    """Event number -> 0-based KPIs: every labelled step inside a line gives its event the
    line's KPIs (an overlap rule written per step, unlike the loader's interval search)."""
    ids = _event_ids(labels)
    found: dict[int, set] = {}
    for start, end, kpis in lines:
        stop = end if exclusive else end + 1
        for event in set(ids[start:stop]) - {0}:
            found.setdefault(int(event), set()).update(k - 1 for k in kpis)
    return found


def test_events_channels_and_steps_match_the_readme(server_machines, app_servers):
    for (dataset, _), channels, step in ((server_machines, 38, 60.0), (app_servers, 19, 300.0)):
        for entity in dataset.entities:
            assert len(entity.events) == EVENTS[entity.name], entity.name
            assert entity.n_channels == channels  # README table: KPIs
            assert entity.step_seconds == step  # README table: 1 minute / 5 minutes
    for entity in app_servers[0].entities:  # README table: 8,640 / 4,320 per entity
        assert entity.train.shape[0] == 8640 and entity.test.shape[0] == 4320


def test_every_event_has_culprits_and_no_line_is_an_orphan(server_machines, app_servers):
    # README: "Every labelled event here has at least one line"
    for dataset, warned in (server_machines, app_servers):
        assert not [w for w in warned if "interpretation_label" in w or "anomaly_type" in w]
        for entity in dataset.entities:
            assert all(e.culprits for e in entity.events), entity.name


@pytest.mark.parametrize(
    ("which", "exclusive"), [("server-machines", True), ("app-servers", False)]
)
def test_culprits_equal_a_plain_parse_of_the_lines(
    which, exclusive, public_data, server_machines, app_servers
):
    dataset = (server_machines if which == "server-machines" else app_servers)[0]
    for entity in dataset.entities:
        lines = _lines(public_data / which / "interpretation_label" / f"{entity.name}.txt")
        expected = _culprits_by_mask(entity.labels, lines, exclusive)
        got = {i: set(e.culprits) for i, e in enumerate(entity.events, start=1)}
        assert got == expected, entity.name


def test_end_conventions_differ_between_the_releases(public_data, server_machines, app_servers):
    # README: server-machine END is one past the event's last index; app-server END is the last
    # index itself. Read that way, every line lies inside one event; read the other way, some
    # server-machine line ends on an unlabelled step.
    for which, (dataset, _), exclusive in (
        ("server-machines", server_machines, True),
        ("app-servers", app_servers, False),
    ):
        past_end = 0
        for entity in dataset.entities:
            ids = _event_ids(entity.labels)
            for start, end, _ in _lines(
                public_data / which / "interpretation_label" / f"{entity.name}.txt"
            ):
                last = end - 1 if exclusive else end
                inside = ids[start : last + 1]
                assert inside.min() == inside.max() > 0, (entity.name, start, end)
                past_end += int(ids[end] == 0) if exclusive else 0
        if exclusive:
            assert past_end > 0


def test_the_events_with_two_lines_unite_both(public_data, server_machines):
    # README: "A few events have two lines, each for a part of the event"
    entity = next(e for e in server_machines[0].entities if e.name == "machine-3-3")
    lines = _lines(public_data / "server-machines" / "interpretation_label" / "machine-3-3.txt")
    ids = _event_ids(entity.labels)
    per_event: dict[int, list] = {}
    for start, end, kpis in lines:
        per_event.setdefault(int(ids[start]), []).append((start, end, kpis))
    doubled = {k: v for k, v in per_event.items() if len(v) == 2}
    assert len(lines) == len(entity.events) + len(doubled) and doubled
    for number, parts in doubled.items():
        event = entity.events[number - 1]
        # a part, not the whole event: equal boundaries would not have matched it
        assert any((s, e - 1) != (event.start, event.end) for s, e, _ in parts)
        assert set(event.culprits) == {k - 1 for _, _, kpis in parts for k in kpis}


def test_kinds_equal_the_csv(public_data, app_servers):
    table = pd.read_csv(public_data / "app-servers" / "anomaly_type.csv")
    dataset, _ = app_servers
    assert set(table["anomaly_type"]) <= KINDS
    for entity in dataset.entities:
        rows = table[table["dataset"] == entity.name]
        ids = _event_ids(entity.labels)
        expected = {}
        for segment, kind in zip(rows["anomaly_segment"], rows["anomaly_type"], strict=True):
            start, end = (int(v) for v in segment.split("-"))
            for event in set(ids[start : end + 1]) - {0}:
                expected[int(event)] = kind
        assert {i: e.kind for i, e in enumerate(entity.events, start=1)} == expected


def test_constant_train_channels_are_reported(server_machines):
    # README: five of the 38 KPIs of machine-1-6 are constant over train but move in test
    warned = [w for w in server_machines[1] if "machine-1-6.txt" in w and "constant" in w]
    assert len(warned) == 1 and warned[0].count("'c") == 5


def test_show_prints_the_metadata_columns(public_data, capsys):
    toml = DATASETS / "app-servers.toml"
    assert main(["datasets", "show", str(toml), "--data-root", str(public_data), "-q"]) == 0
    out = capsys.readouterr().out
    head, _, kinds = out.partition("\n\n")
    header = head.splitlines()[1]
    for column in ("step", "with culprits", "median culprits"):
        assert column in header
    rows = {line.split()[0]: line.split() for line in head.splitlines()[3:]}
    for name, count in EVENTS.items():
        if name in rows:
            assert rows[name][4] == "5min" and rows[name][6] == rows[name][10] == str(count)
    assert kinds.splitlines()[0].split()[3:] == ["metric", "metric-temporal", "temporal"]
    totals = kinds.splitlines()[-1].split()
    assert totals[0] == "all" and sum(int(v) for v in totals[1:]) == sum(
        EVENTS[n] for n in rows if n in EVENTS
    )


def test_a_corrupted_line_exits_2_naming_the_file(public_data, tmp_path, capsys):
    # a private copy of one entity (in a temporary folder, never the repository)
    root = tmp_path / "app-servers"
    for folder in ("train", "test", "test_label", "interpretation_label"):
        (root / folder).mkdir(parents=True)
        shutil.copy(public_data / "app-servers" / folder / "omi-7.txt", root / folder)
    path = root / "interpretation_label" / "omi-7.txt"
    lines = path.read_text().splitlines()
    lines[1] = lines[1].replace(":", ":x,", 1)
    path.write_text("\n".join(lines) + "\n")
    assert main(["datasets", "show", str(root), "-o", "step=5min"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and f"{path}: line 2: KPI 'x'" in err[0]
    # the public experiment on a root holding this copy (beside a tiny invented server-machine
    # folder, to keep the test short) stops before any cell, naming the file
    rng = np.random.default_rng(0)
    for folder, values in (("train", rng.random((50, 38))), ("test", rng.random((50, 38)))):
        (tmp_path / "server-machines" / folder).mkdir(parents=True)
        np.savetxt(tmp_path / "server-machines" / folder / "m.txt", values, delimiter=",")
    (tmp_path / "server-machines" / "test_label").mkdir()
    (tmp_path / "server-machines" / "test_label" / "m.txt").write_text("0\n" * 50)
    spec, out = DATASETS / "public-experiment.toml", tmp_path / "out"
    argv = ["run", str(spec), "--data-root", str(tmp_path), "--out", str(out), "--quiet"]
    assert main(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "line 2: KPI 'x'" in err[0] and str(path.name) in err[0]
    assert not (out / "scorecard.json").exists()
