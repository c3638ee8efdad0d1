"""Bootstrap-interval tables of the tiny real run (invented demo data, see conftest.py)."""

from __future__ import annotations

import html

import numpy as np
import pytest
import scipy.ndimage
from sklearn.metrics import f1_score

from benchkit.cli import main
from benchkit.report.tables import STRATEGIES
from benchkit.report.uncertainty import (
    CachedRun,
    load_clean_scores,
    pooled_prediction,
    uncertainty_table,
)
from benchkit.store import Store

from .mdparse import number, pipe_tables

THRESHOLD_KEY = {"oracle": ("threshold_oracle_f1", "threshold_oracle_pa_f1"),
                 "pot": ("threshold_pot",) * 2, "quantile": ("threshold_quantile",) * 2,
                 "alert-budget": ("threshold_alert_budget",) * 2,
                 "alert-budget-oracle": ("threshold_alert_budget_oracle",) * 2}


def _point_adjusted(pred: np.ndarray, labels: np.ndarray) -> np.ndarray:
    """Point adjustment as defined by Xu et al. 2018: a detected event counts in full.
    Events found with scipy.ndimage.label (reference: scipy), independent of benchkit."""
    runs, n = scipy.ndimage.label(labels.astype(bool))
    out = pred.copy()
    for i in range(1, n + 1):
        if out[runs == i].any():
            out[runs == i] = True
    return out


def _expected_f1(store: Store, strategy: str) -> dict[str, tuple[float, float]]:
    """Pooled F1 and PA-F1 of the first seed's clean cells, recomputed here with sklearn."""
    cells = store.cells_frame()
    clean = cells[(cells["perturbation"] == "none") & (cells["status"] == "ok")]
    clean = clean[clean["seed"] == clean["seed"].min()]
    f1_key, pa_key = THRESHOLD_KEY[strategy]
    out = {}
    for variant, group in clean.groupby("variant"):
        preds, pa_preds, labels = [], [], []
        for key in group["cell_key"]:
            s = store.load_scores(key)
            y = np.asarray(s["labels"]).astype(int)
            preds.append(s["test_scores"] >= s[f1_key])
            # adjust per entity, so no event spans two entities
            pa_preds.append(_point_adjusted(s["test_scores"] >= s[pa_key], y))
            labels.append(y)
        y = np.concatenate(labels)
        # reference: sklearn.metrics.f1_score on the pooled predictions
        out[variant] = (f1_score(y, np.concatenate(preds), zero_division=0.0),
                        f1_score(y, np.concatenate(pa_preds), zero_division=0.0))
    return out


def _interval(cell: str) -> tuple[float, float]:
    low, high = cell.strip("[]").split(", ")
    return float(low), float(high)


@pytest.mark.parametrize("strategy", STRATEGIES)
def test_uncertainty_table_parses_back_to_sklearn_f1_inside_its_interval(tiny_run, strategy):
    text = (tiny_run / "tables" / f"uncertainty-{strategy}.md").read_text(encoding="utf-8")
    header, *rows = pipe_tables(text)[0]
    assert header[3:] == ["F1", "F1 95% interval", "PA-F1", "PA-F1 95% interval"]
    with Store(tiny_run) as store:
        expected = _expected_f1(store, strategy)
    assert {html.unescape(r[0].removesuffix(" (reference)")) for r in rows} == set(expected)
    assert rows[-1][0] == "random (reference)"
    for row in rows:
        variant = html.unescape(row[0].removesuffix(" (reference)"))
        assert row[1] == "3" and row[2] == "15"  # 3 entities x 5 incidents (conftest.py)
        for column, want in ((3, expected[variant][0]), (5, expected[variant][1])):
            estimate = number(row[column])[0]
            low, high = _interval(row[column + 1])
            assert estimate == pytest.approx(want, abs=5e-4), (variant, header[column])
            assert low <= estimate <= high, (variant, header[column])
            assert 0.0 <= low < high <= 1.0, (variant, header[column])


def test_uncertainty_table_data_equals_sklearn_exactly_and_is_seeded(tiny_run):
    with Store(tiny_run) as store:
        run = load_clean_scores(store, store.cells_frame())
        expected = _expected_f1(store, "pot")
    first, again = uncertainty_table(run, "pot"), uncertainty_table(run, "pot")
    assert run.seed == 0
    for variant, (f1, pa) in expected.items():
        assert first.data.at[variant, "f1"] == pytest.approx(f1, rel=1e-12, abs=1e-12)
        assert first.data.at[variant, "pa_f1"] == pytest.approx(pa, rel=1e-12, abs=1e-12)
    assert first.data.equals(again.data)  # a fixed resampling seed repeats bit for bit
    other = uncertainty_table(run, "pot", seed=1).data
    assert not np.allclose(other["f1_low"], first.data["f1_low"])


def test_pooling_keeps_events_of_adjacent_entities_apart():
    # worked by hand: entity A ends inside an event it detects at its last step, entity B starts
    # inside an event it misses. Kept apart, PA gives tp = 2 (A's event), fn = 2 (B's), fp = 0,
    # so PA-F1 = 2*2 / (2*2 + 0 + 2) = 2/3; merged into one event it would be 1.0.
    a = {"test_scores": np.array([0.0, 0.0, 1.0]), "labels": np.array([0, 1, 1]),
         "threshold_pot": 0.5}
    b = {"test_scores": np.array([0.0, 0.0, 0.0]), "labels": np.array([1, 1, 0]),
         "threshold_pot": 0.5}
    pred, labels = pooled_prediction([a, b], "pot", "point")
    assert labels.tolist() == [0, 1, 1, 0, 1, 1, 0]
    table = uncertainty_table(CachedRun(seed=0, scores={"x": [a, b]}), "pot", n_boot=50)
    assert table.data.at["x", "pa_f1"] == pytest.approx(2 / 3)
    assert table.data.at["x", "events"] == 2
    # point-wise: tp 1, fp 0, fn 3 -> 2/(2+3) = 0.4 (reference: sklearn.metrics.f1_score)
    assert table.data.at["x", "f1"] == pytest.approx(0.4)
    assert f1_score(labels, pooled_prediction([a, b], "pot")[0]) == pytest.approx(0.4)
    assert pred.tolist() == [False, False, True, False, False, False, False]


def test_uncertainty_tables_reach_the_cli_output_and_the_html_report(run_copy, capsys):
    assert main(["report", str(run_copy), "--threshold", "quantile"]) == 0
    printed = capsys.readouterr().out
    assert "bootstrap intervals over events, threshold strategy 'quantile'" in printed
    assert "resampling seed 0" in printed and "intervals are wide" in printed
    page = (run_copy / "report.html").read_text(encoding="utf-8")
    assert '<section class="table" id="uncertainty-quantile">' in page
