"""The decision summary comes first (HTML and terminal) and its numbers are the store's.

Common practice, no source: an operator choosing a detector weighs false alerts per day, the
events caught and how late, and cost; the summary puts those before any comparison table.
"""

import html

import numpy as np
import pytest
from scipy.stats import rankdata

from benchkit.cli import main
from benchkit.report import write_all
from benchkit.runner import run_experiment
from benchkit.spec import parse_toml
from benchkit.stats import critical_difference
from benchkit.store import Store

from .mdparse import number, pipe_tables


def _per_seed_mean(metrics, metric, threshold):
    sel = metrics[(metrics["metric"] == metric) & (metrics["threshold"] == threshold)
                  & (metrics["perturbation"] == "none")]
    return sel.groupby(["variant", "seed"])["value"].mean().groupby("variant").mean()


def test_report_html_opens_with_the_decision_summary(tiny_run):
    page = (tiny_run / "report.html").read_text(encoding="utf-8")
    summary = page.index('id="decision-summary"')
    # before the cautions and before any comparison table; the alerts and detection columns
    # sit inside it
    assert summary < page.index('class="cautions"') < page.index('id="comparison-oracle"')
    head = page[summary : page.index('class="cautions"')]
    for column in ("event recall", "false alerts / day", "median time to detect (min)",
                   "tied with best", "F1 margin over random"):
        assert column in head
    assert head.index("&#x27;alert-budget&#x27;") < head.index("&#x27;pot&#x27;") < head.index(
        "&#x27;quantile&#x27;"
    )
    assert "Tied with the best on F1 under &#x27;alert-budget&#x27;" in head


def test_decision_table_numbers_come_from_the_store(tiny_run):
    text = (tiny_run / "tables" / "decision-alert-budget.md").read_text(encoding="utf-8")
    header, *rows = pipe_tables(text)[0]
    with Store(tiny_run) as store:
        metrics = store.metrics_frame()
        cells = store.cells_frame()
    recall = _per_seed_mean(metrics, "event_recall", "alert-budget")
    rate = _per_seed_mean(metrics, "false_alerts_per_day", "alert-budget")
    f1 = _per_seed_mean(metrics, "f1", "alert-budget")
    fit = cells[cells["status"] == "ok"].groupby("variant")["fit_seconds"].mean()
    # the tie test, recomputed: ranks of entity means (pandas pivot, scipy rankdata, Demšar 2006)
    sel = metrics[(metrics["metric"] == "f1") & (metrics["threshold"] == "alert-budget")
                  & (metrics["perturbation"] == "none")]
    table = sel.pivot_table(index="entity", columns="variant", values="value", aggfunc="mean")
    ranks = np.mean([rankdata(-row) for row in table.to_numpy()], axis=0)
    average = dict(zip(table.columns, ranks, strict=True))
    cd = critical_difference(len(average), len(table), 0.05)
    assert header[0] == "detector" and header[2] == "false alerts / day"
    for row in rows:
        variant = html.unescape(row[0].removesuffix(" (reference)"))
        assert number(row[1])[0] == pytest.approx(recall[variant], abs=5e-4)
        assert number(row[2])[0] == pytest.approx(rate[variant], abs=5e-3)
        assert number(row[4])[0] == pytest.approx(f1[variant], abs=5e-4)
        assert number(row[5])[0] == pytest.approx(f1[variant] - f1["random"], abs=5e-4)
        assert number(row[6])[0] == pytest.approx(fit[variant], abs=5e-4)
        tied = average[variant] - min(average.values()) < cd
        assert row[-1] == ("yes" if tied else "no"), variant


def test_report_command_prints_the_decision_summary_first(run_copy, capsys):
    assert main(["report", str(run_copy)]) == 0
    out = capsys.readouterr().out
    assert out.startswith("### Decision summary, threshold strategy 'alert-budget'")
    assert out.index("Decision summary") < out.index("Detector comparison")


NO_SWEEP = """
name = "no-sweep"
seeds = [0]
[execution]
workers = 1
[thresholds]
strategies = ["oracle", "pot"]
[[datasets]]
source = "demo"
[datasets.options]
n_entities = 2
n_channels = 4
n_train = 600
n_test = 600
incidents = { spike = 2, level-shift = 1 }
[[detectors]]
name = "random"
[[detectors]]
name = "pca-residual"
"""


def test_no_empty_sections_without_a_sweep(tmp_path, capsys):
    out = tmp_path / "run"
    assert run_experiment(parse_toml(NO_SWEEP, "no sweep"), out, quiet=True).ok
    written = write_all(out)
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "plot:noise-curves" not in written and 'id="plot-noise-curves"' not in page
    assert "table:robustness" not in written and 'id="robustness"' not in page
    assert "plot:entity-heatmap" in written and "plot:alert-curves" in written
    # only POT is label-free here: one summary table, still first
    assert "table:decision-pot" in written and "table:decision-quantile" not in written
    assert page.index('id="decision-summary"') < page.index('id="comparison-oracle"')
