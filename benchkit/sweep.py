"""Summaries of a noise sweep, computed from the store's long metrics frame.

A sweep is one ``(noise_kind, noise_apply)`` pair over several levels. The clean rows
(``noise_kind == "none"``, level 0) belong to every sweep as its level 0. Values are averaged
over datasets, entities and seeds before anything else is computed.

Robustness index of a curve m(l) sampled at levels ``l_0 < l_1 < ... < l_L`` (any spacing;
``l_0`` is normally 0, the clean run)::

    RI = sum_i (l_{i+1} - l_i) * (m(l_i) + m(l_{i+1})) / 2  /  (m(l_0) * (l_L - l_0))

i.e. the trapezoid-rule area under the curve on the actual level spacing, divided by the area
of a flat curve at the clean value. RI = 1 means no loss over the swept range, 0.5 roughly
means half the clean score on average; RI > 1 means the metric rose with noise. For a metric
where lower is better (delays) a value above 1 is a loss.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from benchkit.errors import SpecError
from benchkit.noise import CLEAN_KIND, format_number

LOWER_IS_BETTER = frozenset({"delay_mean", "delay_median"})
_NEEDED = ("variant", "noise_kind", "noise_level", "noise_apply", "threshold", "metric", "value")
_GROUP = ["variant", "kind", "apply_to"]


def robustness_index(levels, values) -> float:
    """Area under metric-versus-level over (value at the first level x level range).

    Parameters
    ----------
    levels : increasing noise levels (the first is normally 0); any spacing.
    values : the metric at each level.

    Returns
    -------
    The index (see the module docstring); NaN when the first value is 0 or not finite, when
    fewer than two levels are given, or when any value is NaN.
    """
    x = np.asarray(levels, dtype=np.float64)
    y = np.asarray(values, dtype=np.float64)
    if x.ndim != 1 or x.shape != y.shape:
        raise ValueError(f"levels and values must be 1-D of one length, got {x.shape}, {y.shape}")
    if x.size < 2 or y[0] == 0 or not np.isfinite(y).all():
        return float("nan")
    if (np.diff(x) <= 0).any():
        raise ValueError(f"levels must be strictly increasing, got {x.tolist()}")
    area = float(np.sum(np.diff(x) * (y[1:] + y[:-1]) / 2.0))
    return area / (float(y[0]) * float(x[-1] - x[0]))


def _sweep_rows(
    frame: pd.DataFrame, metric: str, threshold: str, kind: str | None, apply_to: str | None
) -> pd.DataFrame:
    """``metric`` rows as ``variant, kind, apply_to, level, value``; clean rows join every sweep."""
    cols = [*_GROUP, "level", "value"]
    if frame.empty:  # no results at all: nothing to summarise
        return pd.DataFrame({c: pd.Series(dtype=object) for c in cols}).astype({"level": float})
    missing = [c for c in _NEEDED if c not in frame.columns]
    if missing:
        raise ValueError(f"metrics frame lacks columns: {', '.join(missing)}")
    if metric not in set(frame["metric"]):
        known = ", ".join(sorted(set(frame["metric"]))) or "(none)"
        raise SpecError(f"metric: {metric!r} is not in these results; present: {known}")
    rows = frame[frame["metric"] == metric]
    at_threshold = rows["threshold"] == threshold
    rows = rows[at_threshold] if at_threshold.any() else rows[rows["threshold"] == "none"]
    clean_mask = rows["noise_kind"] == CLEAN_KIND
    noisy = rows[~clean_mask]
    if kind is not None:
        noisy = noisy[noisy["noise_kind"] == kind]
    if apply_to is not None:
        noisy = noisy[noisy["noise_apply"] == apply_to]
    sweeps = noisy[["noise_kind", "noise_apply"]].drop_duplicates()
    clean = rows.loc[clean_mask, ["variant", "value"]].assign(level=0.0)
    parts = [
        noisy.rename(
            columns={"noise_kind": "kind", "noise_apply": "apply_to", "noise_level": "level"}
        )
    ]
    parts += [clean.assign(kind=k, apply_to=a) for k, a in sweeps.itertuples(index=False)]
    return pd.concat([p[cols] for p in parts], ignore_index=True).astype({"level": np.float64})


def sweep_curves(
    frame: pd.DataFrame,
    metric: str,
    threshold: str = "oracle",
    kind: str | None = None,
    apply_to: str | None = None,
) -> pd.DataFrame:
    """Tidy data for metric-versus-level plots.

    Parameters
    ----------
    frame : the store's long metrics frame (``Store.metrics_frame()``).
    metric : metric name, e.g. ``"pa_f1"``.
    threshold : threshold strategy (``oracle``, ``pot``, ``quantile``); a threshold-free
        metric (stored with threshold ``none``) is found whatever is given.
    kind, apply_to : restrict to one noise kind / one ``apply_to`` (``None`` = all).

    Returns
    -------
    One row per (variant, kind, apply_to, level): ``mean`` and ``std`` (sample standard
    deviation, NaN for one value) over datasets, entities and seeds, and ``n`` values.
    """
    rows = _sweep_rows(frame, metric, threshold, kind, apply_to)
    grouped = rows.groupby([*_GROUP, "level"], sort=True)["value"]
    curves = grouped.agg(mean="mean", std="std", n="count").reset_index()
    return curves[[*_GROUP, "level", "mean", "std", "n"]]


def sweep_summary(
    frame: pd.DataFrame,
    metric: str,
    threshold: str = "oracle",
    kind: str | None = None,
    apply_to: str | None = None,
    higher_is_better: bool | None = None,
) -> pd.DataFrame:
    """One row per (variant, kind, apply_to) summarising how ``metric`` decays with noise.

    Parameters
    ----------
    frame, metric, threshold, kind, apply_to : as in :func:`sweep_curves`.
    higher_is_better : direction for ranks; ``None`` infers it from the metric name (the
        delay metrics are lower-is-better).

    Returns
    -------
    Columns ``variant, kind, apply_to``, then ``mean@<level>`` for every level, ``max_level``,
    ``relative_drop`` = (m(0) - m(max level)) / m(0) (positive = loss; NaN when m(0) = 0),
    ``robustness_index`` (module docstring), and ``rank@<level>`` (1 = best among the variants
    of the same sweep, ties averaged). Levels a sweep lacks are NaN.
    """
    if higher_is_better is None:
        higher_is_better = metric not in LOWER_IS_BETTER
    curves = sweep_curves(frame, metric, threshold, kind, apply_to)
    if curves.empty:  # no sweep in these results
        return pd.DataFrame(columns=[*_GROUP, "max_level", "relative_drop", "robustness_index"])
    levels = sorted(curves["level"].unique())
    wide = curves.pivot_table(index=_GROUP, columns="level", values="mean", aggfunc="first")
    wide = wide.reindex(columns=levels)
    means = wide.to_numpy(dtype=np.float64)
    present = ~np.isnan(means)
    last = np.where(present.any(axis=1), present.shape[1] - 1 - np.argmax(present[:, ::-1], 1), 0)
    first = np.argmax(present, axis=1)
    rows = np.arange(len(means))
    level_array = np.asarray(levels, dtype=np.float64)
    start, end = means[rows, first], means[rows, last]
    with np.errstate(invalid="ignore", divide="ignore"):
        drop = np.where(start != 0, (start - end) / np.where(start != 0, start, 1.0), np.nan)
    robustness = [
        robustness_index(level_array[ok], m[ok]) for m, ok in zip(means, present, strict=True)
    ]
    out = wide.copy()
    out.columns = [f"mean@{format_number(v)}" for v in levels]
    out["max_level"] = level_array[last]
    out["relative_drop"] = drop
    out["robustness_index"] = robustness
    sweep_keys = out.index.droplevel("variant")
    ranked = wide.groupby(sweep_keys).rank(ascending=not higher_is_better, method="average")
    for v in levels:
        out[f"rank@{format_number(v)}"] = ranked[v].to_numpy()
    return out.reset_index()
