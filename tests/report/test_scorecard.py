"""Scorecard digest, loading errors (exit 2) and the metric comparison of verify."""

from __future__ import annotations

import hashlib
import json
import math

import pytest

from benchkit.cli import main
from benchkit.errors import DataError
from benchkit.report.scorecard import canonical_json, compute_digest, load_scorecard
from benchkit.report.verify import compare_cells

CELL = {"variant": "A", "detector": "A", "params": {"w": 3}, "dataset": "d", "entity": "e1",
        "seed": 0, "perturbation": "none", "status": "ok",
        "metrics": {"oracle": {"f1": 0.5, "delay_mean": None}, "none": {"roc_auc": 0.75}}}


def _content() -> dict:
    content = {"benchkit_scorecard": 1, "spec": {"name": "x"}, "environment": {"python": "3"},
               "fingerprints": {"d/e1": "ab"}, "cells": {"k1": json.loads(json.dumps(CELL))}}
    content["digest"] = compute_digest(content)
    return content


def _write(tmp_path, content, name="scorecard.json"):
    path = tmp_path / name
    path.write_text(json.dumps(content, indent=1), encoding="utf-8")
    return path


def test_digest_is_sha256_of_sorted_compact_json():
    content = _content()
    body = {k: v for k, v in content.items() if k != "digest"}
    # reference: hashlib.sha256 over json.dumps with sorted keys and no whitespace
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert content["digest"] == "sha256:" + hashlib.sha256(text.encode()).hexdigest()
    assert canonical_json({"v": math.nan}) == '{"v":null}'  # NaN is not JSON: written as null


def test_load_accepts_an_intact_scorecard(tmp_path):
    assert load_scorecard(_write(tmp_path, _content()))["cells"]["k1"]["entity"] == "e1"


@pytest.mark.parametrize(
    ("text", "message"),
    [
        (None, "no such scorecard file"),
        ('{"cells": [1, 2', "line 1, column"),
        ("[1, 2]", "expected a JSON object"),
        ('{"benchkit_scorecard": 7}', "benchkit_scorecard: expected 1, got 7"),
    ],
)
def test_bad_files_name_the_file_and_exit_2(tmp_path, capsys, text, message):
    path = tmp_path / "scorecard.json"
    if text is not None:
        path.write_text(text, encoding="utf-8")
    with pytest.raises(DataError, match=message):
        load_scorecard(path)
    assert main(["verify", str(path)]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"benchkit: error: {path}: ") and err.count("\n") == 1
    assert "Traceback" not in err


def test_tampered_value_breaks_the_digest_exit_2(tmp_path, capsys):
    content = _content()
    content["cells"]["k1"]["metrics"]["oracle"]["f1"] = 0.9  # digest not recomputed
    path = _write(tmp_path, content)
    assert main(["verify", str(path)]) == 2
    err = capsys.readouterr().err
    assert "digest" in err and "changed after it was written" in err


def test_missing_key_is_named(tmp_path):
    content = _content()
    del content["fingerprints"]
    content["digest"] = compute_digest(content)
    with pytest.raises(DataError, match="key 'fingerprints' is missing"):
        load_scorecard(_write(tmp_path, content))


def test_compare_cells_tolerance_nan_and_missing():
    expected = {"k1": json.loads(json.dumps(CELL))}
    same = {"k1": json.loads(json.dumps(CELL))}
    assert compare_cells(expected, same, 0.0) == []  # null == null counts as agreement
    near = json.loads(json.dumps(CELL))
    near["metrics"]["oracle"]["f1"] = 0.5 + 1e-7
    assert compare_cells(expected, {"k1": near}, 1e-6) == []
    (d,) = compare_cells(expected, {"k1": near}, 1e-8)
    assert (d.threshold, d.metric, d.expected) == ("oracle", "f1", 0.5)
    gone = json.loads(json.dumps(CELL))
    del gone["metrics"]["none"]["roc_auc"]
    gone["metrics"]["oracle"]["delay_mean"] = 3.0
    diffs = {(d.metric, d.actual) for d in compare_cells(expected, {"k1": gone}, 1.0)}
    assert diffs == {("roc_auc", None), ("delay_mean", 3.0)}


def test_compare_matches_changed_keys_by_identity_and_reports_missing_cells():
    expected = {"k1": json.loads(json.dumps(CELL))}
    moved = {"other-key": json.loads(json.dumps(CELL))}
    assert compare_cells(expected, moved, 0.0) == []
    (d,) = compare_cells(expected, {}, 0.0)
    assert (d.metric, d.expected, d.actual) == ("status", "ok", "missing")
