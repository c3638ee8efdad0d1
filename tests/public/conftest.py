"""The public-data tier: tests on real labelled KPI data that this project did not generate.

They read ``../shared/data/public`` (relative to the repository root), or the folder named by
the environment variable ``BENCHKIT_PUBLIC_DATA``. Without it they skip with one line naming
the variable; under CI (``CI`` set) a missing folder fails them instead, so the tier cannot
silently vanish there. The files are read in place and never copied into the repository.
"""

from __future__ import annotations

import os
import warnings
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
VARIABLE = "BENCHKIT_PUBLIC_DATA"
DATASETS = REPO / "datasets"


def public_root() -> Path:
    """The public data folder: ``$BENCHKIT_PUBLIC_DATA`` or ``../shared/data/public``."""
    given = os.environ.get(VARIABLE)
    return Path(given) if given else REPO.parent / "shared" / "data" / "public"


@pytest.fixture(scope="session")
def public_data() -> Path:
    root = public_root()
    if (root / "server-machines").is_dir() and (root / "app-servers").is_dir():
        return root
    message = f"public data not found at {root}: set {VARIABLE} to the folder"
    if os.environ.get("CI"):
        pytest.fail(f"{message} (CI is set: the public-data tier must run)")
    pytest.skip(message)


def load_quietly(toml: str, root: Path, **options):
    """Load a dataset TOML of datasets/ with its DataWarnings returned, not printed."""
    from benchkit.data import DataWarning, load

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", DataWarning)
        dataset = load(str(DATASETS / toml), data_root=str(root), **options)
    return dataset, [str(w.message) for w in caught if w.category is DataWarning]


@pytest.fixture(scope="session")
def server_machines(public_data):
    return load_quietly("server-machines.toml", public_data)


@pytest.fixture(scope="session")
def app_servers(public_data):
    return load_quietly("app-servers.toml", public_data)
