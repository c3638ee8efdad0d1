"""benchkit: an honest benchmarking harness for multivariate KPI anomaly detectors.

The notebook API: :func:`run` runs an experiment spec and returns :class:`Results`;
:func:`open_results` reads an existing results folder. They load on first use, so
``import benchkit`` stays cheap (no pandas, torch or scikit-learn until then).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from benchkit.errors import DataError, SpecError

__version__ = "0.1.0"
DISTRIBUTION = "benchkit-kpi"
"""The distribution name (``pip show benchkit-kpi``): the public index's ``benchkit`` is an
unrelated project. The import package, the command and the entry-point group are ``benchkit``."""

_LAZY = ("run", "open_results", "Results")
__all__ = ["DISTRIBUTION", "DataError", "Results", "SpecError", "open_results", "run"]

if TYPE_CHECKING:
    from benchkit.notebook import Results, open_results, run


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        from benchkit import notebook

        return getattr(notebook, name)
    raise AttributeError(f"module 'benchkit' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted({*globals(), *_LAZY})
