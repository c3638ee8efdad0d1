"""Diagnosis and per-kind tables on a hand-built metrics frame (values worked out by hand)."""

from __future__ import annotations

import math

import pandas as pd
import pytest

from benchkit.report.diagnosis import (
    NO_ATTRIBUTION,
    diagnosis_table,
    diagnosis_tables,
    kind_table,
)
from benchkit.report.render import render_table


def _frame(rows):
    out = []
    for variant, entity, seed, threshold, metric, value in rows:
        out.append({"cell_key": f"{variant}{entity}{seed}", "variant": variant,
                    "detector": variant, "dataset": "larkspur", "entity": entity, "seed": seed,
                    "perturbation": "none", "noise_kind": "none", "noise_level": 0.0,
                    "noise_apply": "none", "threshold": threshold, "metric": metric,
                    "value": value})  # fmt: skip
    return pd.DataFrame(out)


def _diagnosis_rows():
    rows = []
    # pca: entity a diagnoses 2 of 3 culprit events, entity b 1 of 1
    for entity, hit100, hit150, ndcg, chance, diagnosed, culprit_events in (
        ("a", 0.5, 1.0, 0.8, 0.2, 2, 3),
        ("b", 1.0, 1.0, 1.0, 0.4, 1, 1),
    ):
        rows += [
            ("pca", entity, 0, "pot", "hit_rate@100", hit100),
            ("pca", entity, 0, "pot", "hit_rate@150", hit150),
            ("pca", entity, 0, "pot", "ndcg@150", ndcg),
            ("pca", entity, 0, "pot", "chance_hit_rate@150", chance),
            ("pca", entity, 0, "pot", "diagnosed_events", diagnosed),
            ("pca", entity, 0, "none", "culprit_events", culprit_events),
            ("iforest", entity, 0, "pot", "f1", 0.5),
            ("iforest", entity, 0, "none", "culprit_events", culprit_events),
        ]
    return rows


def test_diagnosis_table_means_counts_and_margin():
    table = diagnosis_table(_frame(_diagnosis_rows()), "pot")
    data = table.data
    # means over entities: (0.5 + 1.0) / 2 and (0.8 + 1.0) / 2
    assert data.at["pca", "hit_rate@100_mean"] == pytest.approx(0.75)
    assert data.at["pca", "ndcg@150_mean"] == pytest.approx(0.9)
    # margin: mean over entities of hit_rate@150 - chance: ((1 - .2) + (1 - .4)) / 2
    assert data.at["pca", "margin"] == pytest.approx(0.7)
    assert table.headers[1:4] == ("HitRate@100%", "HitRate@150%", "NDCG@150%")
    rows = {r[0]: r for r in table.rows}
    assert rows["pca"][4] == "3/4"  # diagnosed events summed over entities
    assert rows["iforest"][1] == NO_ATTRIBUTION
    assert "no attribution" in render_table(table, "plain")


def test_diagnosis_table_says_so_when_the_data_has_no_culprits():
    frame = _frame([("pca", "a", 0, "pot", "f1", 0.4)])
    table = diagnosis_table(frame, "pot")
    assert table.rows == () and "names no culprit KPIs" in table.notes[0]
    # one such table for the whole run, not one per strategy
    names = [t.name for t in diagnosis_tables(frame, ["oracle", "pot"])]
    assert names == ["diagnosis", "kinds"]


def test_kind_table_pools_events_over_entities_and_marks_missed_kinds():
    rows = []
    for variant, recall_a, recall_b in (("pca", 1.0, 0.0), ("random", 0.5, 0.0)):
        rows += [
            (variant, "a", 0, "pot", "event_recall[metric]", recall_a),
            (variant, "a", 0, "none", "events[metric]", 2),
            (variant, "b", 0, "pot", "event_recall[metric]", 0.0),
            (variant, "b", 0, "none", "events[metric]", 2),
            (variant, "b", 0, "pot", "event_recall[temporal]", recall_b),
            (variant, "b", 0, "none", "events[temporal]", 3),
            (variant, "a", 0, "oracle", "event_recall[metric]", 1.0),
        ]
    table = kind_table(_frame(rows))
    data = table.data.set_index(["threshold", "variant"])
    # pooled: pca detects 2 of entity a's 2 and 0 of entity b's 2 metric events -> 2/4
    assert data.at[("pot", "pca"), "metric"] == pytest.approx(0.5)
    assert data.at[("pot", "random"), "metric"] == pytest.approx(0.25)
    assert set(data.index.get_level_values("threshold")) == {"pot"}  # realistic only
    assert any("temporal" in n and "No detector" in n for n in table.notes)
    assert table.rows[0][-1].endswith("!")
    assert table.headers[2:] == ("metric (4 events)", "temporal (3 events)")


def test_kind_table_says_so_without_kinds():
    table = kind_table(_frame([("pca", "a", 0, "pot", "f1", math.nan)]))
    assert table.rows == () and "no incident kinds" in table.notes[0]
