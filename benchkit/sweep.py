"""Summaries of swept axes (noise sweeps and hyperparameter sensitivity), from the store's long
metrics frame.

Both are the same shape: a metric against a level, per detector, with the spread over seeds.
Each has its own row builder (:func:`_sweep_rows`, :func:`_sensitivity_rows`) giving rows
``variant, kind, apply_to, level, seed, value``; one summariser (:func:`axis_curves`,
:func:`axis_summary`) serves both. For a sensitivity sweep ``variant`` is the detector entry's
label, ``kind`` the varied hyperparameter, ``apply_to`` the other varied values of the variant
(``""`` when one key varies), and ``level`` the value (its position in the list when the values
are not numbers).

A noise sweep is one ``(noise_kind, noise_apply)`` pair over several levels. The clean rows
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
SPREADS = ("values", "seeds")


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


def _empty_rows() -> pd.DataFrame:
    cols = [*_GROUP, "level", "seed", "value"]
    return pd.DataFrame({c: pd.Series(dtype=object) for c in cols}).astype({"level": float})


def _metric_rows(frame: pd.DataFrame, metric: str, threshold: str) -> pd.DataFrame | None:
    """The rows of ``metric`` under ``threshold`` (or threshold-free); None for an empty frame."""
    if frame.empty:
        return None
    missing = [c for c in _NEEDED if c not in frame.columns]
    if missing:
        raise ValueError(f"metrics frame lacks columns: {', '.join(missing)}")
    if metric not in set(frame["metric"]):
        known = ", ".join(sorted(set(frame["metric"]))) or "(none)"
        raise SpecError(f"metric: {metric!r} is not in these results; present: {known}")
    rows = frame[frame["metric"] == metric]
    if "seed" not in rows.columns:  # a frame without seeds: every value counts as one seed's
        rows = rows.assign(seed=0)
    at_threshold = rows["threshold"] == threshold
    return rows[at_threshold] if at_threshold.any() else rows[rows["threshold"] == "none"]


def _sensitivity_rows(
    frame: pd.DataFrame, metric: str, threshold: str, varied: list[dict]
) -> pd.DataFrame:
    """Clean ``metric`` rows of the varied variants (``benchkit.spec.varied_variants``) as
    ``variant, kind, apply_to, level, seed, value`` (see the module docstring)."""
    rows = _metric_rows(frame, metric, threshold)
    if rows is None or not varied:
        return _empty_rows()
    rows = rows[rows["noise_kind"] == CLEAN_KIND]
    table = pd.DataFrame(varied)
    numeric = table.groupby("parameter")["value"].transform(
        lambda v: all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v)
    ).astype(bool)
    table["level"] = np.where(numeric, table["value"].where(numeric, 0), table["position"])
    table = table.rename(columns={"base": "kind_base"})
    merged = rows[["variant", "seed", "value"]].merge(
        table[["variant", "kind_base", "parameter", "others", "level"]], on="variant"
    )
    merged = merged.drop(columns="variant").rename(
        columns={"kind_base": "variant", "parameter": "kind", "others": "apply_to"}
    )
    return merged[[*_GROUP, "level", "seed", "value"]].astype({"level": np.float64})


def _sweep_rows(
    frame: pd.DataFrame, metric: str, threshold: str, kind: str | None, apply_to: str | None
) -> pd.DataFrame:
    """``metric`` rows as ``variant, kind, apply_to, level, value``; clean rows join every sweep."""
    cols = [*_GROUP, "level", "seed", "value"]
    rows = _metric_rows(frame, metric, threshold)
    if rows is None:  # no results at all: nothing to summarise
        return _empty_rows()
    clean_mask = rows["noise_kind"] == CLEAN_KIND
    noisy = rows[~clean_mask]
    if kind is not None:
        noisy = noisy[noisy["noise_kind"] == kind]
    if apply_to is not None:
        noisy = noisy[noisy["noise_apply"] == apply_to]
    sweeps = noisy[["noise_kind", "noise_apply"]].drop_duplicates()
    clean = rows.loc[clean_mask, ["variant", "seed", "value"]].assign(level=0.0)
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
    return axis_curves(_sweep_rows(frame, metric, threshold, kind, apply_to))


def axis_curves(rows: pd.DataFrame, spread: str = "values") -> pd.DataFrame:
    """The shared summariser's first half: metric against level per ``variant, kind, apply_to``.

    Parameters
    ----------
    rows : ``variant, kind, apply_to, level, seed, value`` (from a row builder).
    spread : ``"values"``: mean and std over every value at a level (datasets, entities and
        seeds); ``"seeds"``: values are first averaged over datasets and entities per seed, and
        the std is over those per-seed means (NaN with one seed).

    Returns
    -------
    One row per (variant, kind, apply_to, level): ``mean``, ``std`` (sample, ddof=1) and ``n``
    (values, or seeds).
    """
    if spread not in SPREADS:
        raise ValueError(f"spread: expected one of {', '.join(SPREADS)}, got {spread!r}")
    if spread == "seeds" and len(rows):
        rows = rows.groupby([*_GROUP, "level", "seed"], sort=True)["value"].mean().reset_index()
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
    return axis_summary(curves, higher_is_better)


def sensitivity_curves(
    frame: pd.DataFrame, metric: str, threshold: str, varied: list[dict]
) -> pd.DataFrame:
    """Metric against each varied hyperparameter's value, clean cells only.

    ``varied`` is ``benchkit.spec.varied_variants(spec)``. Columns as :func:`axis_curves`
    with ``spread="seeds"``: ``variant`` is the detector entry's label, ``kind`` the
    hyperparameter, ``apply_to`` the other varied values, ``std`` the spread over seeds.
    """
    return axis_curves(_sensitivity_rows(frame, metric, threshold, varied), spread="seeds")


def sensitivity_summary(
    frame: pd.DataFrame, metric: str, threshold: str, varied: list[dict],
    higher_is_better: bool | None = None,
) -> pd.DataFrame:
    """:func:`axis_summary` of :func:`sensitivity_curves`: one row per varied hyperparameter
    (and combination of the other varied values) of each detector entry."""
    if higher_is_better is None:
        higher_is_better = metric not in LOWER_IS_BETTER
    return axis_summary(sensitivity_curves(frame, metric, threshold, varied), higher_is_better)


def axis_summary(curves: pd.DataFrame, higher_is_better: bool = True) -> pd.DataFrame:
    """The shared summariser's second half: one row per (variant, kind, apply_to) of ``curves``
    (see :func:`sweep_summary` for the columns)."""
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
