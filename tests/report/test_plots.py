"""Plots: labelled axes with units, colour-blind-safe colours, thresholds and events drawn.
The inputs are small invented arrays (sanity checks of the drawing, not of any detector)."""

from __future__ import annotations

import matplotlib.colors as mcolors
import numpy as np
import pandas as pd

from benchkit.report import plots

# reference: Okabe & Ito (2008), "Color Universal Design", the eight-colour palette (from memory)
PUBLISHED_OKABE_ITO_RGB = [(0, 0, 0), (230, 159, 0), (86, 180, 233), (0, 158, 115),
                           (240, 228, 66), (0, 114, 178), (213, 94, 0), (204, 121, 167)]


def _labelled(fig):
    return [(ax.get_xlabel(), ax.get_ylabel()) for ax in fig.axes]


def test_palette_is_okabe_ito_and_series_stay_distinct():
    rgb = [tuple(round(c * 255) for c in mcolors.to_rgb(h)) for h in plots.OKABE_ITO]
    assert rgb == PUBLISHED_OKABE_ITO_RGB
    styles = {(s["color"], s["linestyle"]) for s in map(plots.series_style, range(24))}
    assert len(styles) == 24  # past eight colours the line style changes


def test_noise_figure_axes_name_quantity_and_unit():
    curves = pd.DataFrame({"variant": ["a", "a", "b", "b"], "kind": "additive",
                           "apply_to": "test", "level": [0.0, 0.5, 0.0, 0.5],
                           "mean": [0.8, 0.6, 0.7, 0.7], "std": [0.1, 0.1, np.nan, np.nan]})
    fig = plots.noise_figure(curves, "pa_f1")
    assert _labelled(fig) == [("additive noise σ (× channel train std)", "pa_f1 (0–1)")]
    assert [t.get_text() for t in fig.axes[0].get_legend().get_texts()] == ["a", "b"]


def test_trace_figure_shades_events_and_draws_each_threshold():
    labels = np.zeros(200, dtype=np.int8)
    labels[50:60] = 1
    scores = np.linspace(0.0, 1.0, 200)
    scores[:5] = -np.inf  # warm-up
    cached = {"test_scores": scores, "labels": labels, "threshold_oracle_f1": 0.5,
              "threshold_pot": 0.9, "threshold_quantile": 40.0}
    fig = plots.trace_figure([("det", cached)], "d/e", "test time step (5 min each)")
    (ax,) = fig.axes
    assert ax.get_xlabel() == "test time step (5 min each)"
    assert ax.get_ylabel() == "score\n(higher = more anomalous)"
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "labelled event" in legend
    assert "oracle (best F1, peeks at labels)" in legend and "POT (train scores)" in legend
    assert "quantile (train scores): off scale, θ=40" in legend  # far above the scores
    drawn = sorted(line.get_ydata()[0] for line in ax.get_lines() if len(line.get_ydata()) == 2)
    assert drawn == [0.5, 0.9]


def test_cd_figure_joins_detectors_closer_than_cd():
    ranks = pd.Series({"a": 1.2, "b": 1.9, "c": 3.5})
    fig = plots.cd_figure(ranks, cd=1.0)
    (ax,) = fig.axes
    assert ax.get_xlabel() == "average rank over entities (1 = best)"
    texts = [t.get_text() for t in ax.texts]
    assert "a (1.20)" in texts and "c (3.50)" in texts
    assert any(t.startswith("CD = 1.00 (Nemenyi") for t in texts)
    bars = [line for line in ax.get_lines() if line.get_linewidth() == 3]
    # a and b (1.2, 1.9) differ by less than CD: one bar; c stands alone
    assert len(bars) == 1 and np.allclose(bars[0].get_xdata(), [1.17, 1.93])


def test_pr_figure_labels_and_no_skill_line(tmp_path):
    fig = plots.pr_figure([("a", np.array([0.0, 0.5, 1.0]), np.array([1.0, 0.8, 0.3]))],
                          0.3, "d/e")
    assert _labelled(fig) == [("recall, point-wise (0–1)", "precision, point-wise (0–1)")]
    path = plots.plot_pr_curves([("a", np.array([0.0, 1.0]), np.array([1.0, 0.3]))], 0.3,
                                tmp_path / "pr.png", "d/e")
    assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not list(tmp_path.glob(".*.tmp"))  # written atomically, no temporary left
