"""Builders for small dataset files in a temporary folder."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest


def write_matrix(path: Path, values: np.ndarray) -> Path:
    """Comma-separated rows with repr() floats, as a user's export tool would write them."""
    path.parent.mkdir(parents=True, exist_ok=True)
    rows = np.atleast_2d(np.asarray(values).T).T
    path.write_text("".join(",".join(repr(float(v)) for v in row) + "\n" for row in rows))
    return path


def write_entity(root: Path, name: str, train, test, labels) -> None:
    write_matrix(root / "train" / f"{name}.txt", np.asarray(train, dtype=float))
    write_matrix(root / "test" / f"{name}.txt", np.asarray(test, dtype=float))
    labels_path = root / "test_label" / f"{name}.txt"
    labels_path.parent.mkdir(parents=True, exist_ok=True)
    labels_path.write_text("".join(f"{int(v)}\n" for v in labels))


@pytest.fixture
def small_arrays():
    """A deterministic two-channel series (sanity data, invented here)."""
    rng = np.random.default_rng(7)
    train = np.round(rng.normal(size=(40, 3)), 3)
    test = np.round(rng.normal(size=(30, 3)), 3)
    labels = np.zeros(30, dtype=np.int8)
    labels[[4, 5, 6, 20]] = 1
    return train, test, labels


@pytest.fixture
def split_root(tmp_path, small_arrays):
    """A split-folder root with entities m-1-2 and m-1-10 (natural order check)."""
    train, test, labels = small_arrays
    root = tmp_path / "sm"
    write_entity(root, "m-1-10", train + 1.0, test + 1.0, labels)
    write_entity(root, "m-1-2", train, test, labels)
    return root
