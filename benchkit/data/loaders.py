"""``load(source, **options)``: one entry point for every accepted dataset source."""

from __future__ import annotations

import os
from pathlib import Path

from benchkit.data import demo, npz, split_folder, tables
from benchkit.data.dataset_toml import load_dataset_toml
from benchkit.data.model import Dataset
from benchkit.data.validate import check_options
from benchkit.errors import DataError

DEMO = "demo"
# options every source accepts (used by dataset TOML files, ignored elsewhere)
COMMON_OPTIONS = ("data_root",)
KINDS = ("demo", "a split-folder root", ".csv", ".parquet", ".npz", ".toml")


def load(source: str | os.PathLike, **options) -> Dataset:
    """Load a dataset from ``source``.

    Parameters
    ----------
    source : ``"demo"``; a split-folder root (``train/``, ``test/``, ``test_label/``); a
      ``.csv`` / ``.parquet`` table; an ``.npz`` archive; or a dataset ``.toml`` file.
    **options : passed to the format's loader: ``missing`` (all files), ``label_column``,
      ``timestamp_column``, ``train_fraction``, ``split_at`` (tables), the demo's sizes
      (``seed``, ``n_entities``, ...), and ``data_root`` (fills ``{data_root}`` in a TOML path;
      default: the ``BENCHKIT_DATA_ROOT`` environment variable).

    Raises
    ------
    DataError : for bad input, naming the file (and row and column where known).
    """
    text = os.fspath(source)
    if text == DEMO:
        options.pop("data_root", None)
        check_options(DEMO, options, demo.OPTIONS, "the demo dataset")
        return demo.make_demo(**options)
    path = Path(text)
    suffix = path.suffix.lower()
    if suffix == ".toml":
        return load_dataset_toml(path, **options)
    options.pop("data_root", None)
    if not path.exists():
        raise DataError(f"{path}: no such file or folder")
    if path.is_dir():
        check_options(text, options, split_folder.OPTIONS, "a split-folder dataset")
        return split_folder.load_split_folder(path, **options)
    if suffix in tables.TABLE_SUFFIXES:
        check_options(text, options, tables.OPTIONS, "a table")
        return tables.load_tables([path], **options)
    if suffix == ".npz":
        check_options(text, options, npz.OPTIONS, "an .npz archive")
        return npz.load_npz(path, **options)
    raise DataError(f"{path}: unknown dataset format (accepted: {', '.join(KINDS)})")
