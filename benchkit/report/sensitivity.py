"""Hyperparameter sensitivity: the metric against each value a ``vary`` table lists.

Built by the same summariser as the noise sweep (:mod:`benchkit.sweep`): per detector entry
and varied hyperparameter, the clean metric is averaged over datasets and entities per seed,
then the mean and the spread (sample std) over seeds are shown for each value.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from benchkit.report import cautions
from benchkit.report.tables import LOWER_IS_BETTER, Stat, Table, best_flags, metric_threshold
from benchkit.spec import vary_label
from benchkit.sweep import sensitivity_curves


def value_texts(varied: list[dict]) -> dict[tuple[str, str, float], str]:
    """``(entry, hyperparameter, level) -> value as written`` for every varied value."""
    out = {}
    for v in varied:
        value = v["value"]
        numeric = isinstance(value, (int, float)) and not isinstance(value, bool)
        level = float(value) if numeric else float(v["position"])
        out[(v["base"], v["parameter"], level)] = vary_label(value)
    # a hyperparameter with any non-numeric value is placed by position for all its values
    for v in varied:
        key = (v["base"], v["parameter"], float(v["position"]))
        out.setdefault(key, vary_label(v["value"]))
    return out


def sensitivity_table(
    metrics: pd.DataFrame, varied: list[dict], metric: str = "f1", threshold: str = "oracle"
) -> Table:
    """One row per value of each varied hyperparameter: ``metric`` mean ± std over seeds."""
    shown = metric_threshold(metric, threshold)
    title = f"Sensitivity of '{metric}' (threshold: {shown}) to hyperparameters"
    headers = ("detector", "hyperparameter", "other varied values", "value",
               f"{metric} (mean ± std over seeds)", "seeds")  # fmt: skip
    curves = sensitivity_curves(metrics, metric, threshold, varied) if varied else None
    if curves is None or curves.empty:
        return Table("sensitivity", title, headers, (),
                     ("This run varies no hyperparameter (vary = {...} in [[detectors]]).",),
                     pd.DataFrame())  # fmt: skip
    texts = value_texts(varied)
    curves = curves.copy()
    curves["value"] = [texts.get((b, k, lv), f"{lv:g}") for b, k, lv in
                       zip(curves["variant"], curves["kind"], curves["level"], strict=True)]
    lower = metric in LOWER_IS_BETTER
    curves["best"] = False
    for _, part in curves.groupby(["variant", "kind", "apply_to"]):
        curves.loc[part.index, "best"] = best_flags(part["mean"], lower_is_better=lower)
    curves = curves.sort_values(["variant", "kind", "apply_to", "level"], kind="stable")
    rows = tuple(
        (r["variant"], r["kind"], r["apply_to"] or "-", r["value"],
         Stat(r["mean"], r["std"], best=bool(r["best"])), int(r["n"]))
        for r in curves.to_dict("records")
    )  # fmt: skip
    notes = (
        "Clean cells only. For each value the metric is averaged over datasets and entities per "
        "seed; the table shows the mean and the sample standard deviation over seeds (no spread "
        "with one seed). Bold (or *) marks the best value of each row group. A value that wins "
        "here on these entities is a measurement, not a recommendation for other data.",
        cautions.NO_GUARANTEE,
    )
    curves["level"] = curves["level"].astype(np.float64)
    return Table("sensitivity", title, headers, rows, notes, curves.reset_index(drop=True))
