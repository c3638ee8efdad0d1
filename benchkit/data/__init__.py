"""Datasets: the data model, loaders with validation, the demo scenario, fingerprints."""

from benchkit.data.demo import make_demo
from benchkit.data.events import labels_to_events
from benchkit.data.export import export_split_folder
from benchkit.data.loaders import load
from benchkit.data.model import Dataset, Entity
from benchkit.data.validate import DataWarning
from benchkit.errors import DataError

__all__ = [
    "Dataset",
    "Entity",
    "DataError",
    "DataWarning",
    "load",
    "make_demo",
    "export_split_folder",
    "labels_to_events",
]
