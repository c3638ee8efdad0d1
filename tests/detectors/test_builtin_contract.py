"""Every classical built-in, with its defaults and with a non-default variant, passes the
contract kit in full (the deep models are checked in their own tests)."""

from __future__ import annotations

import pytest

from benchkit import registry
from benchkit.testing import PASSED, check_detector

VARIANTS = {
    "random": {"seed": 3},
    "step-change": {"norm": "max"},
    "isolation-forest": {"features": "extended", "n_estimators": 50, "window": 4},
    "pca-residual": {"statistic": "combined", "n_components": 2},
    "correlation-break": {"reduce": "pair-mean", "window": 12},
    "shape-clusters": {"window": 8, "n_clusters": 3},
    "pyod:ECOD": {"features": "point", "window": 1},
    "pyod:COPOD": {"window": 20},
    "pyod:LOF": {"n_neighbors": 5, "max_train": 100},
    "pyod:KNN": {"method": "median"},
}


@pytest.mark.parametrize("name", sorted(VARIANTS))
def test_builtin_passes_the_contract_kit(name):
    # every built-in saves and loads (bit-identical scores), so export-model can bundle it
    assert check_detector(registry.get(name)).status("persistence") == PASSED
    assert check_detector(registry.create(name, **VARIANTS[name])).status("persistence") == PASSED


def test_every_classical_builtin_is_covered():
    classical = {n for n in registry.available() if not registry.get(n).needs_torch}
    assert classical == set(VARIANTS)
