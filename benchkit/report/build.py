"""Build every report output of a results folder: tables, plots, HTML and the scorecard."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.errors import DataError
from benchkit.metrics import alert_curve, f1_curve
from benchkit.metrics.alerts import duration
from benchkit.report import plots
from benchkit.report.decision import decision_tables
from benchkit.report.diagnosis import diagnosis_tables
from benchkit.report.files import write_text_atomic
from benchkit.report.html import build_html
from benchkit.report.render import EXTENSIONS, check_format, render_table
from benchkit.report.scorecard import write_scorecard
from benchkit.report.sensitivity import sensitivity_table
from benchkit.report.tables import (
    CLEAN,
    STRATEGIES,
    Table,
    comparison_table,
    entity_table,
    metric_threshold,
    rank_table,
    robustness_table,
    timing_table,
)
from benchkit.report.training import training_curves, training_table
from benchkit.report.uncertainty import load_clean_scores, uncertainty_table
from benchkit.spec import varied_variants
from benchkit.store import Store
from benchkit.sweep import sweep_curves

DEMO_STEP = "test time step (5 min each)"
GENERIC_STEP = "test time step (index)"


def check_choices(metrics: pd.DataFrame, metric: str, threshold: str | None) -> None:
    """Raise DataError when the run lacks ``metric`` or the ``threshold`` strategy."""
    present = sorted(set(metrics["metric"]))
    if metric not in present:
        raise DataError(
            f"--metric: this run has no metric {metric!r}; it has: {', '.join(present) or 'none'}"
        )
    strategies = _strategies(metrics)
    if threshold is not None and threshold not in strategies:
        raise DataError(
            f"--threshold: this run has no {threshold!r} results; it has: "
            f"{', '.join(strategies) or 'none'}"
        )


def _strategies(metrics: pd.DataFrame) -> list[str]:
    return [s for s in STRATEGIES if s in set(metrics["threshold"])]


def chosen_threshold(metrics: pd.DataFrame, threshold: str | None) -> str:
    """``threshold``, else the first strategy the run has (oracle, pot, quantile order)."""
    return threshold or next(iter(_strategies(metrics)), "oracle")


def build_tables(
    metrics: pd.DataFrame,
    cells: pd.DataFrame,
    metric: str = "f1",
    threshold: str | None = None,
    store: Store | None = None,
    spec: dict | None = None,
) -> list[Table]:
    """Comparison tables (every strategy in the run, or only ``threshold``), with ``store``
    the bootstrap-interval tables of the same strategies (they need the cached scores), then
    the diagnosis tables of the same strategies and the per-kind table, then
    the timing table, with ``store`` the training table (how the deep cells trained), with a
    ``spec`` (plain data) that varies hyperparameters the sensitivity table, then the
    robustness and rank tables for ``metric`` under ``threshold`` (default: the first strategy
    present, in the order oracle, pot, quantile). The rank table is last."""
    check_choices(metrics, metric, threshold)
    chosen = chosen_threshold(metrics, threshold)
    shown = [threshold] if threshold else _strategies(metrics)
    cached = load_clean_scores(store, cells) if store is not None else None
    robustness = robustness_table(metrics, metric, chosen)
    training = training_table(store.training_frame()) if store is not None else None
    return [
        *(comparison_table(metrics, s) for s in shown),
        *(uncertainty_table(cached, s) for s in shown if cached is not None),
        *diagnosis_tables(metrics, shown),
        timing_table(cells),
        *([training] if training is not None and len(training.rows) else []),  # none empty
        *([sensitivity_table(metrics, varied_variants(spec), metric, chosen)]
          if spec is not None and varied_variants(spec) else []),
        *([robustness] if len(robustness.rows) else []),  # no empty section without a sweep
        rank_table(metrics, metric, chosen),
    ]


def _trace_cells(cells: pd.DataFrame) -> tuple[str, pd.DataFrame]:
    """The clean, successful cells of the first entity and seed: one per variant."""
    ok = cells[(cells["status"] == "ok") & (cells["perturbation"] == CLEAN)]
    if ok.empty:
        return "", ok
    first = ok.sort_values(["dataset", "entity", "seed"]).iloc[0]
    pick = ok[
        (ok["dataset"] == first["dataset"])
        & (ok["entity"] == first["entity"])
        & (ok["seed"] == first["seed"])
    ]
    return f"{first['dataset']}/{first['entity']}", pick.sort_values("variant")


def _step_label(spec: dict) -> str:
    sources = {d.get("source") for d in spec.get("datasets", [])}
    return DEMO_STEP if sources == {"demo"} else GENERIC_STEP


def cached_step(scores: dict) -> float | None:
    """The step length saved with a cell's cached scores (None where unknown)."""
    step = scores.get("step_seconds")
    return None if step is None or not np.isfinite(float(step)) else float(step)


def _merge_gap(spec: dict) -> int:
    return int(spec.get("thresholds", {}).get("merge_gap", 0))


def alert_curves(cached: list[tuple[str, dict]], merge_gap: int) -> tuple[list, str]:
    """Per variant ``(variant, false alert rate, event recall)`` over every threshold of its
    cached test scores, and the rate's unit (per day where the step is known for all)."""
    steps = [cached_step(scores) for _, scores in cached]
    per = "day" if all(s is not None for s in steps) else "1000-steps"
    unit = "false alerts per day" if per == "day" else "false alerts per 1,000 steps"
    out = []
    for (variant, scores), step in zip(cached, steps, strict=True):
        labels = np.asarray(scores["labels"])
        curve = alert_curve(np.asarray(scores["test_scores"]), labels, merge_gap)
        length = duration(len(labels), step, per)
        out.append((variant, curve.false_alerts / length, curve.event_recall))
    return out, unit


def build_plots(
    store: Store, metrics: pd.DataFrame, cells: pd.DataFrame, spec: dict, rank: Table,
    metric: str, threshold: str, folder: Path,
) -> list[tuple[str, str, Path]]:
    """Write the PNGs to ``folder``; return ``(name, caption, path)`` triples.

    ``cells`` and ``spec`` are the store's cells frame and the latest run's spec, already read
    by the caller; ``store`` is used only for the cached scores of the traced entity."""
    out = []
    curves = sweep_curves(metrics, metric, threshold)
    if len(curves):  # no empty section: the noise plot only when the run has a sweep
        out.append(("noise-curves", f"{metric} versus noise level per detector",
                    plots.plot_noise_curves(curves, metric, folder / "noise-curves.png")))
    heat = entity_table(metrics, metric, threshold)
    if heat.size:
        out.append(("entity-heatmap", f"{metric} (threshold: {threshold}) per detector and entity",
                    plots.plot_entity_heatmap(heat, metric, threshold,
                                              folder / "entity-heatmap.png")))
    entity, picked = _trace_cells(cells)
    cached = [(row.variant, store.load_scores(row.cell_key)) for row in picked.itertuples()]
    if cached:
        alerts = alert_curves(cached, _merge_gap(spec))
        out.append(("alert-curves",
                    f"Event recall versus {alerts[1]} on {entity}, every threshold (log axis)",
                    plots.plot_alert_curves(alerts[0], alerts[1], folder / "alert-curves.png",
                                            entity)))
    step = _step_label(spec)
    out.append(("score-trace", f"Test scores on {entity}, labelled events shaded, thresholds drawn",
                plots.plot_score_traces(cached, folder / "score-trace.png", entity, step)))
    cd = rank.data.attrs.get("cd", np.nan)
    out.append(("critical-difference",
                f"Critical-difference diagram of {metric} over entities (Nemenyi)",
                plots.plot_critical_difference(rank.data["average_rank"].dropna(), cd,
                                               folder / "critical-difference.png",
                                               rank.data.attrs.get("alpha", 0.05))))
    pr = []
    for variant, scores in cached:
        curve = f1_curve(np.asarray(scores["test_scores"]), np.asarray(scores["labels"]))
        pr.append((variant, curve.recall, curve.precision))
    prevalence = float(np.mean(cached[0][1]["labels"])) if cached else np.nan
    out.append(("pr-curves", f"Point-wise precision-recall curves on {entity}",
                plots.plot_pr_curves(pr, prevalence, folder / "pr-curves.png", entity)))
    varied = varied_variants(spec)
    if varied:
        sensitivity = sensitivity_table(metrics, varied, metric, threshold).data
        out.append(("sensitivity", f"{metric} versus each varied hyperparameter "
                    "(± std over seeds)",
                    plots.plot_sensitivity(sensitivity, metric, folder / "sensitivity.png")))
    losses = training_curves(store.training_frame())
    if not losses.empty:
        out.append(("training-loss", "Train and validation loss per epoch of the deep detectors "
                    "(clean run; one colour per entity)",
                    plots.plot_training_curves(losses, folder / "training-loss.png")))
    return out


def write_all(
    out: Path, fmt: str = "md", *, metric: str = "f1", threshold: str | None = None
) -> dict[str, Path]:
    """Write ``OUT/tables/*``, ``OUT/plots/*.png``, ``OUT/report.html`` and ``OUT/scorecard.json``.

    Parameters
    ----------
    out : a results folder written by ``benchkit run``.
    fmt : table file format: ``md``, ``latex``, ``html`` or ``plain``.
    metric : the metric ranked, swept and plotted (threshold-free ones such as ``roc_auc``
        are allowed).
    threshold : strategy for the robustness and rank tables and the plots; the comparison
        tables cover every strategy the run has unless one is given.

    Returns
    -------
    ``name -> path`` of every file written, e.g. ``"table:timing"``, ``"plot:pr-curves"``,
    ``"html"``, ``"scorecard"``.
    """
    check_format(fmt)
    out = Path(out)
    written: dict[str, Path] = {}
    with Store(out) as store:
        metrics, cells, run = store.metrics_frame(), store.cells_frame(), store.latest_run()
        if metrics.empty:
            raise DataError(f"{out}: the latest run has no successful cell to report on")
        decisions = decision_tables(metrics, cells)
        tables = build_tables(metrics, cells, metric, threshold, store, run["spec"])
        for table in (*decisions, *tables):
            path = out / "tables" / f"{table.name}.{EXTENSIONS[fmt]}"
            written[f"table:{table.name}"] = write_text_atomic(path, render_table(table, fmt))
        chosen = metric_threshold(metric, chosen_threshold(metrics, threshold))
        figures = build_plots(store, metrics, cells, run["spec"], tables[-1], metric, chosen,
                              out / "plots")
        written.update({f"plot:{name}": path for name, _, path in figures})
        failed = cells[cells["status"] != "ok"]
        remarks = [
            f"{len(failed)} of {len(cells)} cells did not finish "
            f"({', '.join(sorted(set(failed['status'])))}); their metrics are missing."
        ] if len(failed) else []
        page = build_html(run.get("name") or run["spec"].get("name", "run"), tables, figures,
                          run.get("spec_toml", ""), run.get("environment", {}),
                          run.get("fingerprints", {}), remarks, summary=decisions)
        written["html"] = write_text_atomic(out / "report.html", page)
        written["scorecard"] = write_scorecard(store, out / "scorecard.json")
    return written
