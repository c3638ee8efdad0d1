"""Tiny specs for the runner tests (invented demo data, small sizes)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

from benchkit.spec import ExperimentSpec, dumps_toml, parse_spec

TINY_DEMO = {
    "n_entities": 2,
    "n_channels": 4,
    "n_train": 600,
    "n_test": 500,
    "incidents": {"spike": 2, "level-shift": 1},
}


def tiny_spec_data(detectors: list[dict[str, Any]], **top: Any) -> dict[str, Any]:
    """A spec table on the tiny demo; ``top`` adds or replaces top-level keys."""
    data: dict[str, Any] = {
        "name": "tiny",
        "seeds": [0],
        "datasets": [{"source": "demo", "options": dict(TINY_DEMO)}],
        "detectors": detectors,
    }
    data.update(top)
    return data


def tiny_spec(detectors: list[dict[str, Any]], **top: Any) -> ExperimentSpec:
    return parse_spec(tiny_spec_data(detectors, **top))


def write_spec(path: Path, detectors: list[dict[str, Any]], **top: Any) -> Path:
    path.write_text(dumps_toml(tiny_spec_data(detectors, **top)), encoding="utf-8")
    return path
