"""Reports and verification of a small real run (invented demo data, see conftest.py)."""

from __future__ import annotations

import base64
import html
import json
from pathlib import Path

import numpy as np
import pytest

from benchkit.cli import main
from benchkit.report import cautions
from benchkit.report.scorecard import compute_digest
from benchkit.store import Store

from .conftest import SCRIPT_LABEL
from .mdparse import number, pipe_tables

STRATEGIES = ("oracle", "pot", "quantile")
PLOTS = ("noise-curves", "entity-heatmap", "alert-curves", "score-trace", "critical-difference",
         "pr-curves")


def _expected(metrics, metric: str, threshold: str) -> dict[str, tuple[float, float]]:
    """Independent computation from the store's long frame: clean cells, mean over entities
    for each seed, then mean and sample std over seeds (what the table note says)."""
    thr = "none" if metric in ("roc_auc", "pr_auc", "random_pa_f1") else threshold
    sel = metrics[(metrics["metric"] == metric) & (metrics["threshold"] == thr)
                  & (metrics["perturbation"] == "none")]
    per_seed = sel.groupby(["variant", "seed"])["value"].mean().unstack("seed")
    return {v: (row.mean(), row.std(ddof=1)) for v, row in per_seed.iterrows()}


@pytest.mark.parametrize("strategy", STRATEGIES)
def test_markdown_tables_parse_back_to_the_store(tiny_run, strategy):
    text = (tiny_run / "tables" / f"comparison-{strategy}.md").read_text(encoding="utf-8")
    header, *rows = pipe_tables(text)[0]
    with Store(tiny_run) as store:
        metrics = store.metrics_frame()
    checked = 0
    for column, metric in enumerate(header[1:-2], start=1):
        expected = _expected(metrics, metric, strategy)
        best_mean = max(m for m, _ in expected.values())
        for row in rows:
            variant = html.unescape(row[0].removesuffix(" (reference)"))
            mean, std, bold = number(row[column])
            want_mean, want_std = expected[variant]
            assert mean == pytest.approx(want_mean, abs=5e-4), (variant, metric)  # 3 decimals
            assert std == pytest.approx(want_std, abs=5e-4), (variant, metric)
            assert bold == bool(np.isclose(want_mean, best_mean, atol=1e-12)), (variant, metric)
            checked += 1
    assert checked >= 4 * 6  # every variant, at least six metric columns
    # the PA inflation columns: margin over random's PA-F1 and the stored expectation
    pa = _expected(metrics, "pa_f1", strategy)
    rnd = _expected(metrics, "random_pa_f1", strategy)
    for row in rows:
        variant = html.unescape(row[0].removesuffix(" (reference)"))
        assert number(row[-2])[0] == pytest.approx(pa[variant][0] - pa["random"][0], abs=5e-4)
        assert number(row[-1])[0] == pytest.approx(rnd[variant][0], abs=5e-4)


def test_timing_table_parses_back_to_the_cells(tiny_run):
    header, *rows = pipe_tables((tiny_run / "tables" / "timing.md").read_text("utf-8"))[0]
    with Store(tiny_run) as store:
        cells = store.cells_frame()
    fit = cells.groupby("variant")["fit_seconds"].mean()
    memory = cells.groupby("variant")["peak_memory_mb"].max()
    assert {html.unescape(r[0]) for r in rows} == set(cells["variant"])
    for row in rows:
        variant = html.unescape(row[0])
        assert number(row[1])[0] == pytest.approx(fit[variant], abs=5e-4)
        assert number(row[4])[0] == pytest.approx(memory[variant], abs=0.05)


def test_html_report_has_every_detector_plot_and_caution(tiny_run):
    page = (tiny_run / "report.html").read_text(encoding="utf-8")
    with Store(tiny_run) as store:
        variants = set(store.cells_frame()["variant"])
        run = store.latest_run()
    assert SCRIPT_LABEL in variants
    for variant in variants - {SCRIPT_LABEL}:
        assert variant in page
    # the label is escaped everywhere, never live markup
    assert SCRIPT_LABEL not in page and "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    for caution in cautions.ALL:
        assert caution.replace("'", "&#x27;") in page
    images = page.split('src="data:image/png;base64,')[1:]
    assert len(images) == len(PLOTS)
    for chunk in images:
        assert base64.b64decode(chunk.split('"', 1)[0])[:8] == b"\x89PNG\r\n\x1a\n"
    for name in PLOTS:
        assert f'id="plot-{name}"' in page
        assert (tiny_run / "plots" / f"{name}.png").read_bytes()[:4] == b"\x89PNG"
    for fingerprint in run["fingerprints"].values():
        assert fingerprint in page
    assert "n_entities = 3" in page  # the spec
    assert run["environment"]["python"] in page


def test_scorecard_holds_every_cell_and_a_valid_digest(tiny_run):
    content = json.loads((tiny_run / "scorecard.json").read_text("utf-8"))
    with Store(tiny_run) as store:
        cells = store.cells_frame()
        metrics = store.metrics_frame()
    assert set(content["cells"]) == set(cells["cell_key"])
    finite = metrics[np.isfinite(metrics["value"])]  # NaN is stored as null
    row = finite.iloc[len(finite) // 2]
    stored = content["cells"][row["cell_key"]]["metrics"][row["threshold"]][row["metric"]]
    assert stored == pytest.approx(row["value"], rel=0, abs=0)
    assert content["digest"] == compute_digest(content)


def test_verify_reproduces_from_the_cache(run_copy, capsys):
    assert main(["verify", str(run_copy / "scorecard.json")]) == 0
    assert capsys.readouterr().out.startswith("reproduced: all ")


def test_verify_reports_a_tampered_metric_exit_1(run_copy, capsys):
    path = run_copy / "scorecard.json"
    content = json.loads(path.read_text("utf-8"))
    key = sorted(content["cells"])[0]
    content["cells"][key]["metrics"]["oracle"]["f1"] += 0.25
    content["digest"] = compute_digest(content)  # a consistent, but false, scorecard
    path.write_text(json.dumps(content), encoding="utf-8")
    assert main(["verify", str(path), "--tolerance", "1e-6"]) == 1
    out = capsys.readouterr().out
    assert "not reproduced: 1 values differ beyond 1e-06" in out
    (line,) = [ln for ln in out.splitlines() if " f1 " in f" {ln} " and "oracle" in ln]
    assert content["cells"][key]["entity"] in line
    # with a tolerance above the change it counts as reproduced
    assert main(["verify", str(path), "--tolerance", "0.3"]) == 0


def test_verify_fresh_rerun_reproduces_bit_for_bit(run_copy, capsys):
    assert main(["verify", str(run_copy / "scorecard.json"), "--fresh", "--tolerance", "0"]) == 0
    assert "reproduced" in capsys.readouterr().out


def test_report_command_prints_tables_and_rejects_unknown_metric(run_copy, capsys):
    assert main(["report", str(run_copy), "--format", "plain", "--threshold", "pot"]) == 0
    out = capsys.readouterr().out
    assert "Detector comparison, threshold strategy 'pot'" in out
    assert "'oracle'" not in out.split("Cost per cell")[0]
    assert (run_copy / "tables" / "comparison-pot.txt").is_file()
    assert main(["report", str(run_copy), "--metric", "no_such"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("benchkit: error: --metric: this run has no metric 'no_such'")


def test_report_of_a_folder_without_results_exits_2(tmp_path, capsys):
    assert main(["report", str(tmp_path)]) == 2
    assert capsys.readouterr().err.startswith(f"benchkit: error: {tmp_path}")


REFERENCE = Path(__file__).resolve().parents[2] / "results" / "reference" / "scorecard.json"


@pytest.mark.skipif(not REFERENCE.is_file(), reason=f"{REFERENCE} is not committed yet")
def test_committed_reference_scorecard_verifies(capsys):
    # Re-runs the default experiment (a few minutes on 2 cores) in a temporary folder. On any
    # x86-64-v3 machine with the pinned package versions (scripts/constraints.txt) the numeric
    # path is the reference's, so every value must agree exactly; elsewhere (another
    # architecture, other versions) exact agreement is impossible and every difference must lie
    # within the reference's own spread over its seeds (benchkit.report.verify).
    from benchkit.report.verify import verify_scorecard

    result = verify_scorecard(REFERENCE, 1e-9)
    lines = [f"{d.cell} {d.threshold} {d.metric}: {d.expected} -> {d.actual}"
             for d in result.differences[:20]]  # fmt: skip
    if result.exact_expected:
        assert result.reproduced, "\n".join(lines)
    else:
        assert result.explained_by_platform, "\n".join(result.blockers + lines)
