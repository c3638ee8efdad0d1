"""Datasets: the data model, loaders with validation, the demo scenario, fingerprints."""

from benchkit.data.model import Dataset, Entity
from benchkit.errors import DataError

__all__ = ["Dataset", "Entity", "DataError"]
