"""Small metrics/cells frames in the store's column layout (docs/internals.md), for unit tests."""

from __future__ import annotations

import pandas as pd

METRIC_COLUMNS = ("cell_key", "variant", "detector", "dataset", "entity", "seed", "perturbation",
                  "noise_kind", "noise_level", "noise_apply", "threshold", "metric", "value")


def metric_rows(values: dict, threshold: str = "oracle", metric: str = "f1",
                perturbation: str = "none", kind: str = "none", level: float = 0.0) -> list[dict]:
    """Rows from ``{(variant, entity, seed): value}``."""
    return [
        dict(cell_key=f"{v}|{e}|{s}|{perturbation}", variant=v, detector=v, dataset="d",
             entity=e, seed=s, perturbation=perturbation, noise_kind=kind, noise_level=level,
             noise_apply="both", threshold=threshold if metric not in ("roc_auc", "pr_auc",
             "random_pa_f1") else "none", metric=metric, value=float(x))
        for (v, e, s), x in values.items()
    ]


def frame(*row_lists: list[dict]) -> pd.DataFrame:
    rows = [r for rl in row_lists for r in rl]
    return pd.DataFrame(rows, columns=list(METRIC_COLUMNS))
