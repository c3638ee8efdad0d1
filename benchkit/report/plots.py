"""PNG plots drawn with matplotlib's Agg canvas (no display, no pyplot global state).

Colours are the Okabe–Ito palette, distinguishable by readers with the common colour-vision
deficiencies; past eight series the colours repeat with another line style. Every axis names its
quantity and unit.
"""

from __future__ import annotations

import io
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.ticker import MaxNLocator

from benchkit.report.files import write_bytes_atomic
from benchkit.stats import tied_groups

# Okabe & Ito, "Color Universal Design" (2008): the eight colours, typed in as hex.
OKABE_ITO = (
    "#000000",  # black
    "#E69F00",  # orange
    "#56B4E9",  # sky blue
    "#009E73",  # bluish green
    "#F0E442",  # yellow
    "#0072B2",  # blue
    "#D55E00",  # vermillion
    "#CC79A7",  # reddish purple
)
LINE_STYLES = ("-", "--", ":", "-.")
MARKERS = ("o", "s", "^", "D", "v", "P", "X", "*")
THRESHOLD_STYLES = {
    "threshold_oracle_f1": ("oracle (best F1, peeks at labels)", "#D55E00", "--"),
    "threshold_pot": ("POT (train scores)", "#0072B2", "-."),
    "threshold_quantile": ("quantile (train scores)", "#009E73", ":"),
    "threshold_alert_budget": ("alert budget (train scores)", "#CC79A7", (0, (5, 2, 1, 2))),
}
NOISE_UNITS = {
    "additive": "additive noise σ (× channel train std)",
    "multiplicative": "multiplicative noise σ (relative error, × value)",
    "impulse": "impulse noise level (spike rate per step, or t-noise scale)",
    "missing": "missing-value rate (fraction of steps)",
    "drift": "gain drift level (gain change by series end, × N(0,1) draw)",
}
CHAR_INCHES = 0.075  # width of one character of a "small" label, roughly, for layout
BOUNDED = ("f1", "precision", "recall", "auc", "event_recall")


def series_style(i: int) -> dict:
    """Colour, line style and marker of the ``i``-th series."""
    return {
        "color": OKABE_ITO[i % len(OKABE_ITO)],
        "linestyle": LINE_STYLES[(i // len(OKABE_ITO)) % len(LINE_STYLES)],
        "marker": MARKERS[i % len(MARKERS)],
    }


def metric_axis_label(metric: str) -> str:
    """Axis label with the metric's unit, e.g. ``f1 (0–1)`` or ``delay_mean (time steps)``."""
    if metric.startswith("delay_m"):
        return f"{metric} (time steps)"
    if any(metric.endswith(b) for b in BOUNDED):
        return f"{metric} (0–1)"
    return metric


def _save(fig: Figure, path: Path) -> Path:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, metadata={"Software": None})
    write_bytes_atomic(path, buf.getvalue())
    return path


def plot_noise_curves(curves: pd.DataFrame, metric: str, path: Path) -> Path:
    """Write :func:`noise_figure` as a PNG to ``path``."""
    return _save(noise_figure(curves, metric), path)


def noise_figure(curves: pd.DataFrame, metric: str) -> Figure:
    """Metric versus noise level per detector, one panel per (noise kind, applied to).

    ``curves`` has columns ``variant, kind, apply_to, level, mean, std`` (as from
    :func:`benchkit.sweep.sweep_curves`); the band is ± one std over entities and seeds.
    """
    panels = sorted(curves.groupby(["kind", "apply_to"]).groups) if len(curves) else []
    n = max(len(panels), 1)
    width = 5.5 * n + 2.2  # room for the legend on the right, outside the curves
    fig = Figure(figsize=(width, 4.0))
    fig.subplots_adjust(left=0.7 / width, right=1 - 2.3 / width, bottom=0.13, top=0.92, wspace=0.25)
    axes = fig.subplots(1, n, squeeze=False)[0]
    variants = sorted(curves["variant"].unique()) if len(curves) else []
    for ax, (kind, apply_to) in zip(axes, panels, strict=False):
        panel = curves[(curves["kind"] == kind) & (curves["apply_to"] == apply_to)]
        for i, variant in enumerate(variants):
            line = panel[panel["variant"] == variant].sort_values("level")
            if line.empty:
                continue
            style = series_style(i)
            x, y = line["level"].to_numpy(float), line["mean"].to_numpy(float)
            sd = np.nan_to_num(line["std"].to_numpy(float))
            ax.plot(x, y, label=variant, **style)
            ax.fill_between(x, y - sd, y + sd, color=style["color"], alpha=0.12, linewidth=0)
        ax.set_xlabel(NOISE_UNITS.get(kind, f"{kind} noise level"))
        ax.set_ylabel(metric_axis_label(metric))
        ax.set_title(f"{kind} noise applied to {apply_to}")
        ax.grid(alpha=0.3)
    if not panels:
        axes[0].text(0.5, 0.5, "this run has no noise sweep", ha="center", va="center")
        axes[0].set_xlabel("noise level")
        axes[0].set_ylabel(metric_axis_label(metric))
    if variants and panels:
        axes[-1].legend(fontsize="small", loc="upper left", bbox_to_anchor=(1.02, 1.0))
    return fig


def _draw_thresholds(ax, scores: np.ndarray, thresholds: Mapping[str, float]) -> None:
    finite = scores[np.isfinite(scores)]
    lo, hi = (float(finite.min()), float(finite.max())) if finite.size else (0.0, 1.0)
    span = max(hi - lo, 1e-12)
    for key, (label, colour, style) in THRESHOLD_STYLES.items():
        theta = thresholds.get(key)
        if theta is None or not np.isfinite(theta):
            continue
        if lo - span <= theta <= hi + span:
            ax.axhline(theta, color=colour, linestyle=style, linewidth=1.2, label=label)
        else:
            off = f"{label}: off scale, θ={theta:.3g}"
            ax.plot([], [], color=colour, linestyle=style, label=off)


def plot_score_traces(
    traces: Sequence[tuple[str, Mapping]], path: Path, entity: str, step_label: str
) -> Path:
    """Write :func:`trace_figure` as a PNG to ``path``."""
    return _save(trace_figure(traces, entity, step_label), path)


def trace_figure(traces: Sequence[tuple[str, Mapping]], entity: str, step_label: str) -> Figure:
    """Test scores of one entity, one panel per detector, labelled events shaded.

    ``traces`` holds ``(variant, scores)`` pairs where ``scores`` is what ``Store.load_scores``
    returns (``test_scores``, ``labels`` and the ``threshold_*`` values). Warm-up steps
    (``-inf``) are left blank.
    """
    n = max(len(traces), 1)
    height = 1.9 * n + 0.8
    width = 13.0  # the legends sit to the right of each panel, outside the data
    fig = Figure(figsize=(width, height))
    fig.subplots_adjust(left=0.8 / width, right=1 - 2.9 / width, top=1 - 0.35 / height,
                        bottom=0.55 / height, hspace=0.45)
    axes = fig.subplots(n, 1, squeeze=False, sharex=True)[:, 0]
    for ax, (variant, cached) in zip(axes, traces, strict=False):
        scores = np.asarray(cached["test_scores"], dtype=float)
        labels = np.asarray(cached["labels"]).astype(bool)
        x = np.arange(scores.size)
        ax.fill_between(
            x, 0, 1, where=labels, transform=ax.get_xaxis_transform(),
            color="#E69F00", alpha=0.3, linewidth=0, step="mid", label="labelled event",
        )
        ax.plot(x, np.where(np.isfinite(scores), scores, np.nan), color="#000000", linewidth=0.7)
        _draw_thresholds(ax, scores, cached)
        ax.set_title(f"{variant} on {entity}", fontsize="medium", loc="left")
        ax.set_ylabel("score\n(higher = more anomalous)", fontsize="small")
        ax.legend(fontsize="x-small", loc="upper left", bbox_to_anchor=(1.01, 1.0))
    axes[-1].set_xlabel(step_label)
    if not traces:
        axes[0].text(0.5, 0.5, "no cached scores", ha="center", va="center")
    return fig


def plot_critical_difference(
    average_ranks: pd.Series, cd: float, path: Path, alpha: float = 0.05
) -> Path:
    """Write :func:`cd_figure` as a PNG to ``path``."""
    return _save(cd_figure(average_ranks, cd, alpha), path)


def cd_figure(average_ranks: pd.Series, cd: float, alpha: float = 0.05) -> Figure:
    """Critical-difference diagram: average ranks on one axis (1 = best, at the left), detectors
    joined by a bar when their ranks differ by less than the Nemenyi critical difference ``cd``.

    The figure widens so that the longest detector label fits beside the axis.
    """
    order = average_ranks.sort_values()
    names, ranks = list(order.index), order.to_numpy(float)
    k = max(len(ranks), 2)
    half = (len(ranks) + 1) // 2
    labels = [f"{name} ({r:.2f})" for name, r in zip(names, ranks, strict=True)]
    label_in = 0.15 + CHAR_INCHES * max((len(t) for t in labels), default=0)
    width = max(8.0, 2 * label_in + 4.0)
    unit = (k - 1) / (width - 2 * label_in - 0.4)  # rank units per inch
    margin = (label_in + 0.2) * unit
    height = 1.2 + 0.32 * half
    fig = Figure(figsize=(width, height + 0.6))
    fig.subplots_adjust(left=0.0, right=1.0, bottom=0.02, top=1 - 0.45 / (height + 0.6))
    ax = fig.subplots()
    ax.set_xlim(1 - margin, k + margin)
    ax.set_ylim(-(half * 0.55 + 0.6), 1.6)
    ax.hlines(0, 1, k, color="#000000", linewidth=1)
    ticks = np.arange(1, k + 1)
    ax.vlines(ticks, 0, 0.12, color="#000000", linewidth=1)
    for t in ticks:
        ax.text(t, 0.2, str(t), ha="center", va="bottom", fontsize="small")
    for i, (label, r) in enumerate(zip(labels, ranks, strict=True)):
        left = i < half
        row = -(i + 1 if left else len(ranks) - i) * 0.55
        end = 1 - 0.1 * unit if left else k + 0.1 * unit
        ax.plot([r, r, end], [0, row, row], color=OKABE_ITO[5], linewidth=1)
        ax.text(end - 0.05 * unit if left else end + 0.05 * unit, row, label,
                ha="right" if left else "left", va="center", fontsize="small")
    for g, group in enumerate(tied_groups(order, cd) if np.isfinite(cd) else []):
        y = -0.18 - 0.14 * g
        lo, hi = order[group[0]], order[group[-1]]
        ax.plot([lo - 0.03, hi + 0.03], [y, y], color=OKABE_ITO[6], linewidth=3)
    if np.isfinite(cd):
        text = f"CD = {cd:.2f} (Nemenyi, α = {alpha:g})"
        if cd > k - 1:
            text += ": wider than the rank range, no pair differs significantly"
        ax.plot([1, 1 + min(cd, k - 1)], [1.05, 1.05], color="#000000", linewidth=2)
        ax.text(1, 1.15, text, ha="left", va="bottom", fontsize="small")
    ax.set_xlabel("average rank over entities (1 = best)")
    ax.xaxis.set_label_position("top")
    ax.set_xticks([])
    ax.set_yticks([])
    for side in ("left", "right", "top", "bottom"):
        ax.spines[side].set_visible(False)
    return fig


def plot_pr_curves(
    curves: Sequence[tuple[str, np.ndarray, np.ndarray]], prevalence: float, path: Path, entity: str
) -> Path:
    """Write :func:`pr_figure` as a PNG to ``path``."""
    return _save(pr_figure(curves, prevalence, entity), path)


def pr_figure(
    curves: Sequence[tuple[str, np.ndarray, np.ndarray]], prevalence: float, entity: str
) -> Figure:
    """Point-wise precision–recall curves, one line per detector, with the no-skill level.

    ``curves`` holds ``(variant, recall, precision)``; ``prevalence`` is the share of anomalous
    test steps (the precision of a detector that flags at random).
    """
    fig = Figure(figsize=(6.5, 5.0))
    fig.subplots_adjust(left=0.12, right=0.97, bottom=0.11, top=0.93)
    ax = fig.subplots()
    for i, (variant, recall, precision) in enumerate(curves):
        style = series_style(i)
        style.pop("marker")
        ax.plot(recall, precision, label=variant, drawstyle="steps-post", **style)
    if np.isfinite(prevalence):
        ax.axhline(prevalence, color="#999999", linestyle=":", label="random flagging")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1.02)
    ax.set_xlabel("recall, point-wise (0–1)")
    ax.set_ylabel("precision, point-wise (0–1)")
    ax.set_title(f"Precision–recall on {entity}")
    ax.grid(alpha=0.3)
    ax.legend(fontsize="small", loc="best")
    return fig


def plot_training_curves(curves: pd.DataFrame, path: Path) -> Path:
    """Write :func:`training_figure` as a PNG to ``path``."""
    return _save(training_figure(curves), path)


def training_figure(curves: pd.DataFrame) -> Figure:
    """Train and validation loss per epoch, one panel per detector, entities overlaid.

    ``curves`` is :func:`benchkit.report.training.training_curves`: one colour per
    dataset/entity, validation loss solid, train loss dashed; each seed is its own line. A
    cross marks the epoch whose weights were kept (the lowest validation loss).
    """
    variants = sorted(curves["variant"].unique()) if len(curves) else []
    n = max(len(variants), 1)
    cols = min(n, 3)
    rows = (n + cols - 1) // cols
    width, height = 4.6 * cols + 2.4, 3.3 * rows + 0.6
    fig = Figure(figsize=(width, height))
    fig.subplots_adjust(left=0.6 / width, right=1 - 2.5 / width, bottom=0.55 / height,
                        top=1 - 0.45 / height, wspace=0.3, hspace=0.5)
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    entities = sorted({f"{d}/{e}" for d, e in zip(curves.get("dataset", []),
                                                  curves.get("entity", []), strict=True)})
    colour = {name: OKABE_ITO[(i + 1) % len(OKABE_ITO)] for i, name in enumerate(entities)}
    for ax, variant in zip(axes, variants, strict=False):
        panel = curves[curves["variant"] == variant]
        for (dataset, entity, _seed), line in panel.groupby(["dataset", "entity", "seed"]):
            c = colour[f"{dataset}/{entity}"]
            x = line["epoch"].to_numpy()
            val = line["validation_loss"].to_numpy(float)
            ax.plot(x, val, color=c, linewidth=1.2)
            ax.plot(x, line["train_loss"].to_numpy(float), color=c, linewidth=0.8, linestyle="--")
            if np.isfinite(val).any():
                best = int(np.nanargmin(val))
                ax.plot(x[best], val[best], marker="x", color=c, markersize=6)
        ax.set_title(variant, fontsize="medium", loc="left")
        ax.set_xlabel("epoch (from 0)")
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
        ax.set_ylabel("loss (negative ELBO per window)", fontsize="small")
        ax.grid(alpha=0.3)
    for ax in axes[len(variants):]:
        ax.set_axis_off()
    if not variants:
        axes[0].set_axis_on()
        axes[0].text(0.5, 0.5, "no cell trained epoch by epoch", ha="center", va="center")
    handles = [axes[0].plot([], [], color=colour[e], label=e)[0] for e in entities]
    handles += [axes[0].plot([], [], color="#777777", label="validation")[0],
                axes[0].plot([], [], color="#777777", linestyle="--", label="train")[0],
                axes[0].plot([], [], color="#777777", marker="x", linestyle="",
                             label="kept (best) epoch")[0]]  # fmt: skip
    if variants:
        fig.legend(handles=handles, fontsize="small", loc="upper left",
                   bbox_to_anchor=(1 - 2.4 / width, 1 - 0.45 / height))
    return fig


def plot_sensitivity(curves: pd.DataFrame, metric: str, path: Path) -> Path:
    """Write :func:`sensitivity_figure` as a PNG to ``path``."""
    return _save(sensitivity_figure(curves, metric), path)


def sensitivity_figure(curves: pd.DataFrame, metric: str) -> Figure:
    """Metric against each varied hyperparameter, one panel per (detector entry, parameter).

    ``curves`` is the ``data`` of :func:`benchkit.report.sensitivity.sensitivity_table`
    (``variant, kind, apply_to, level, mean, std, value``); error bars are ± one std over
    seeds; one line per combination of the other varied values.
    """
    panels = sorted(curves.groupby(["variant", "kind"]).groups) if len(curves) else []
    n = max(len(panels), 1)
    cols = min(n, 3)
    rows = (n + cols - 1) // cols
    width, height = 4.8 * cols + 0.8, 3.4 * rows + 0.5
    fig = Figure(figsize=(width, height))
    fig.subplots_adjust(left=0.7 / width, right=1 - 0.2 / width, bottom=0.6 / height,
                        top=1 - 0.45 / height, wspace=0.3, hspace=0.55)
    axes = fig.subplots(rows, cols, squeeze=False).ravel()
    for ax, (variant, kind) in zip(axes, panels, strict=False):
        panel = curves[(curves["variant"] == variant) & (curves["kind"] == kind)]
        for i, (others, line) in enumerate(panel.groupby("apply_to", sort=True)):
            line = line.sort_values("level")
            style = series_style(i)
            ax.errorbar(line["level"].to_numpy(float), line["mean"].to_numpy(float),
                        yerr=np.nan_to_num(line["std"].to_numpy(float)), capsize=3,
                        label=others or None, **style)  # fmt: skip
            ax.set_xticks(line["level"].to_numpy(float), line["value"].astype(str).tolist())
        ax.set_title(variant, fontsize="medium", loc="left")
        ax.set_xlabel(f"{kind} (value as listed in vary)")
        ax.set_ylabel(metric_axis_label(metric))
        ax.grid(alpha=0.3)
        if panel["apply_to"].astype(bool).any():
            ax.legend(fontsize="x-small", loc="best")
    for ax in axes[len(panels):]:
        ax.set_axis_off()
    if not panels:
        axes[0].set_axis_on()
        axes[0].text(0.5, 0.5, "this run varies no hyperparameter", ha="center", va="center")
    return fig


def plot_entity_heatmap(table: pd.DataFrame, metric: str, threshold: str, path: Path) -> Path:
    """Write :func:`heatmap_figure` as a PNG to ``path``."""
    return _save(heatmap_figure(table, metric, threshold), path)


def heatmap_figure(table: pd.DataFrame, metric: str, threshold: str) -> Figure:
    """Detectors (rows) by entities (columns), each cell the clean ``metric`` averaged over seeds.

    ``table`` is :func:`benchkit.report.tables.entity_table` (rows entities, columns variants).
    The colour scale is a perceptually uniform one readable in grey; each cell prints its value;
    missing cells (failed) are blank and say "n/a".
    """
    data = table.T  # detectors down, entities across
    n_rows, n_cols = max(data.shape[0], 1), max(data.shape[1], 1)
    label_in = 0.15 + CHAR_INCHES * max((len(str(v)) for v in data.index), default=4)
    width = label_in + 0.75 * n_cols + 1.6
    height = 0.38 * n_rows + 2.2
    fig = Figure(figsize=(width, height))
    fig.subplots_adjust(left=label_in / width, right=1 - 1.3 / width, bottom=1.5 / height,
                        top=1 - 0.45 / height)
    ax = fig.subplots()
    values = data.to_numpy(dtype=float)
    bounded = any(metric.endswith(b) for b in BOUNDED)
    finite = values[np.isfinite(values)]
    lo, hi = (0.0, 1.0) if bounded else ((finite.min(), finite.max()) if finite.size else (0, 1))
    image = ax.imshow(np.ma.masked_invalid(values), cmap="cividis", vmin=lo, vmax=hi,
                      aspect="auto")
    mid = (lo + hi) / 2
    for (i, j), v in np.ndenumerate(values):
        text, colour = ("n/a", "#000000") if not np.isfinite(v) else (
            f"{v:.2f}", "#000000" if v > mid else "#FFFFFF")
        ax.text(j, i, text, ha="center", va="center", fontsize="x-small", color=colour)
    ax.set_xticks(range(data.shape[1]), [str(c) for c in data.columns], rotation=60,
                  ha="right", fontsize="small")
    ax.set_yticks(range(data.shape[0]), [str(r) for r in data.index], fontsize="small")
    ax.set_xlabel("entity (dataset/entity)")
    ax.set_title(f"{metric} per detector and entity (threshold: {threshold})", fontsize="medium")
    bar = fig.colorbar(image, ax=ax, fraction=0.05, pad=0.02)
    bar.set_label(metric_axis_label(metric))
    return fig


def plot_alert_curves(
    curves: Sequence[tuple[str, np.ndarray, np.ndarray]], unit: str, path: Path, entity: str
) -> Path:
    """Write :func:`alert_figure` as a PNG to ``path``."""
    return _save(alert_figure(curves, unit, entity), path)


def alert_figure(
    curves: Sequence[tuple[str, np.ndarray, np.ndarray]], unit: str, entity: str
) -> Figure:
    """Event recall against the false alert rate over every threshold, one line per detector.

    ``curves`` holds ``(variant, false alert rate, event recall)`` with thresholds descending.
    The rate axis is logarithmic; thresholds with no false alert sit on the left edge (marked
    "0"). The ``random`` detector, when present, is drawn as the reference (dashed grey).
    """
    width = 9.5
    fig = Figure(figsize=(width, 5.0))
    fig.subplots_adjust(left=0.8 / width, right=1 - 2.6 / width, bottom=0.12, top=0.92)
    ax = fig.subplots()
    positive = [r[r > 0] for _, r, _ in curves]
    floor = min((p.min() for p in positive if p.size), default=1.0) / 2.0
    for i, (variant, rate, recall) in enumerate(curves):
        x = np.where(rate > 0, rate, floor)
        if variant == "random":
            style = {"color": "#999999", "linestyle": "--"}
            label = "random (reference)"
        else:
            style = series_style(i)
            style.pop("marker")
            label = variant
        ax.plot(x, recall, drawstyle="steps-post", label=label, **style)
    ax.set_xscale("log")
    ax.axvline(floor, color="#DDDDDD", linewidth=0.8)
    ax.text(floor, 1.03, " 0", fontsize="x-small", va="bottom", ha="left", color="#666666")
    ax.set_ylim(0, 1.08)
    ax.set_xlabel(f"{unit} on the test part (log scale)")
    ax.set_ylabel("event recall (0–1)")
    ax.set_title(f"Event recall versus false alerts on {entity}")
    ax.grid(alpha=0.3, which="both")
    if curves:
        ax.legend(fontsize="small", loc="upper left", bbox_to_anchor=(1.02, 1.0))
    return fig
