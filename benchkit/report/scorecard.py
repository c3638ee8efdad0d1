"""The scorecard: one JSON file that describes a run completely enough to re-run and compare it.

Layout (``scorecard.json``)::

    {"benchkit_scorecard": 1,
     "spec": {...}, "spec_toml": "...", "environment": {...}, "fingerprints": {...},
     "cells": {"<cell key>": {"variant": ..., "detector": ..., "params": ..., "dataset": ...,
                              "entity": ..., "seed": ..., "perturbation": ..., "status": ...,
                              "metrics": {"<threshold>": {"<metric>": value, ...}, ...}}, ...},
     "digest": "sha256:<hex>"}

The digest is the sha256 of the canonical JSON (sorted keys, no spaces, UTF-8, non-finite numbers
written as ``null``) of every other key. Timings are left out: they are not reproducible.
"""

from __future__ import annotations

import hashlib
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from benchkit.errors import DataError
from benchkit.report.files import write_text_atomic

FORMAT_KEY = "benchkit_scorecard"
FORMAT_VERSION = 1
IDENTITY_FIELDS = ("variant", "detector", "params", "dataset", "entity", "seed", "perturbation")
REQUIRED_KEYS = ("spec", "environment", "fingerprints", "cells", "digest")


def plain(value: Any) -> Any:
    """``value`` with numpy scalars and arrays made plain Python and non-finite floats ``None``."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, list | tuple | np.ndarray):
        return [plain(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def canonical_json(content: dict) -> str:
    """Sorted keys, no whitespace, UTF-8 text; the form the digest is computed over."""
    return json.dumps(
        plain(content), sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False
    )


def compute_digest(content: dict) -> str:
    """``sha256:<hex>`` over the canonical JSON of ``content`` without its ``digest`` key."""
    rest = {k: v for k, v in content.items() if k != "digest"}
    return "sha256:" + hashlib.sha256(canonical_json(rest).encode("utf-8")).hexdigest()


def _params(value: Any) -> Any:
    if isinstance(value, str):
        try:
            return json.loads(value)
        except json.JSONDecodeError:
            return value
    return value


def cell_records(cells: pd.DataFrame, metrics: pd.DataFrame) -> dict[str, dict]:
    """Per cell key: its identifying fields, status and ``{threshold: {metric: value}}``."""
    nested: dict[str, dict[str, dict[str, float]]] = {}
    for key, threshold, metric, value in metrics[
        ["cell_key", "threshold", "metric", "value"]
    ].itertuples(index=False):
        nested.setdefault(key, {}).setdefault(threshold, {})[metric] = value
    records = {}
    for row in cells.to_dict("records"):
        record = {f: row[f] for f in IDENTITY_FIELDS}
        record["params"] = _params(record["params"])
        record["status"] = row["status"]
        record["metrics"] = nested.get(row["cell_key"], {})
        records[str(row["cell_key"])] = record
    return plain(records)


def build_scorecard(store) -> dict:
    """The scorecard content (with its digest) of the store's latest run."""
    run = store.latest_run()
    content = {
        FORMAT_KEY: FORMAT_VERSION,
        "spec": run["spec"],
        "spec_toml": run.get("spec_toml", ""),
        "environment": run.get("environment", {}),
        "fingerprints": run.get("fingerprints", {}),
        "cells": cell_records(store.cells_frame(), store.metrics_frame()),
    }
    content = plain(content)
    content["digest"] = compute_digest(content)
    return content


def write_scorecard(store, path: Path) -> Path:
    """Write the store's scorecard to ``path`` (indented JSON, written atomically)."""
    content = build_scorecard(store)
    text = json.dumps(content, sort_keys=True, indent=1, ensure_ascii=False, allow_nan=False)
    return write_text_atomic(path, text + "\n")


def load_scorecard(path: Path) -> dict:
    """Read and check a scorecard: the file exists, is JSON, has every key, and its digest holds.

    Raises
    ------
    DataError
        naming the file and what is wrong with it.
    """
    path = Path(path)
    if not path.is_file():
        raise DataError(f"{path}: no such scorecard file")
    try:
        content = json.loads(path.read_text(encoding="utf-8"))
    except UnicodeDecodeError as exc:
        raise DataError(f"{path}: not UTF-8 text ({exc.reason})") from None
    except json.JSONDecodeError as exc:
        raise DataError(
            f"{path}: line {exc.lineno}, column {exc.colno}: malformed JSON ({exc.msg})"
        ) from None
    if not isinstance(content, dict):
        raise DataError(f"{path}: expected a JSON object at the top level")
    if content.get(FORMAT_KEY) != FORMAT_VERSION:
        raise DataError(
            f"{path}: {FORMAT_KEY}: expected {FORMAT_VERSION}, got "
            f"{json.dumps(content.get(FORMAT_KEY))}; not a benchkit scorecard of this version"
        )
    for key in REQUIRED_KEYS:
        if key not in content:
            raise DataError(f"{path}: key '{key}' is missing")
    if not isinstance(content["cells"], dict):
        raise DataError(f"{path}: cells: expected an object keyed by cell key")
    expected = compute_digest(content)
    if content["digest"] != expected:
        raise DataError(
            f"{path}: digest: the stored {content['digest']!s:.20}... does not match the content "
            f"({expected:.20}...); the file was changed after it was written"
        )
    return content
