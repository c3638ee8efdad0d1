"""Dataset description files (TOML), kept under ``datasets/``.

Keys::

    name = "server-machines"          # optional, default: the file's stem
    description = "..."               # optional, one line
    format = "split-folder"           # split-folder | table | npz | demo
    path = "{data_root}/server-machines"   # not for demo; relative to this file's folder
    [options]                         # passed to the format's loader
    missing = "error"

``{data_root}`` in ``path`` is replaced by the ``data_root`` option (``--data-root`` on the
command line) or else the ``BENCHKIT_DATA_ROOT`` environment variable; a relative data root is
read from the working directory (other relative paths from the TOML file's folder). A table
``path`` may be a single file or a folder of ``.csv`` / ``.parquet`` files (one entity each).
"""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

from benchkit.data import demo, npz, split_folder, tables
from benchkit.data.model import Dataset
from benchkit.data.validate import check_options
from benchkit.errors import DataError

ROOT_VARIABLE = "BENCHKIT_DATA_ROOT"
PLACEHOLDER = "{data_root}"
KEYS = ("name", "description", "format", "path", "options")
FORMATS = {
    "split-folder": split_folder.OPTIONS,
    "table": tables.OPTIONS,
    "npz": npz.OPTIONS,
    "demo": demo.OPTIONS,
}


def read_dataset_toml(path: Path) -> dict:
    """Parse and check the keys of a dataset TOML file (nothing is loaded)."""
    if not path.is_file():
        raise DataError(f"{path}: no such file")
    try:
        doc = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise DataError(f"{path}: not valid TOML ({exc})") from None
    except UnicodeDecodeError:
        raise DataError(f"{path}: not a text file (cannot decode as UTF-8)") from None
    unknown = sorted(set(doc) - set(KEYS))
    if unknown:
        raise DataError(f"{path}: unknown key {unknown[0]!r} (valid: {', '.join(KEYS)})")
    fmt = doc.get("format")
    if fmt not in FORMATS:
        raise DataError(f"{path}: key 'format' must be one of {', '.join(FORMATS)}, got {fmt!r}")
    for key in ("name", "description", "path"):
        if key in doc and not isinstance(doc[key], str):
            raise DataError(f"{path}: key {key!r} must be a string")
    if fmt != "demo" and "path" not in doc:
        raise DataError(f"{path}: key 'path' is required for format {fmt!r}")
    if not isinstance(doc.get("options", {}), dict):
        raise DataError(f"{path}: key 'options' must be a table")
    check_options(f"{path}: options", doc.get("options", {}), FORMATS[fmt], f"format {fmt!r}")
    return doc


def load_dataset_toml(path: str | Path, data_root: str | None = None, **options) -> Dataset:
    """Load the dataset a TOML file describes; ``options`` override its ``[options]``."""
    path = Path(path)
    doc = read_dataset_toml(path)
    fmt = doc["format"]
    merged = {**doc.get("options", {}), **options}
    check_options(str(path), merged, FORMATS[fmt], f"format {fmt!r}")
    if fmt == "demo":
        dataset = demo.make_demo(**merged)
    else:
        target = resolve_path(path, doc["path"], data_root)
        dataset = _load_format(path, fmt, target, merged)
    dataset.name = doc.get("name", path.stem)
    return dataset


def resolve_path(toml_path: Path, raw: str, data_root: str | None) -> Path:
    """Fill ``{data_root}`` and resolve relative paths against the TOML file's folder."""
    if PLACEHOLDER in raw:
        root = data_root if data_root is not None else os.environ.get(ROOT_VARIABLE)
        origin = "data_root option" if data_root is not None else ROOT_VARIABLE
        if not root:
            raise DataError(
                f"{toml_path}: key 'path' needs the data root; pass --data-root DIR "
                f"(option data_root) or set {ROOT_VARIABLE} (see datasets/README.md)"
            )
        # a relative data root is read from the working directory, like any command-line path
        raw = raw.replace(PLACEHOLDER, os.path.abspath(Path(root).expanduser()))
    else:
        origin = None
    target = Path(raw).expanduser()
    if not target.is_absolute():
        target = toml_path.parent / target
    if not target.exists():
        via = f" ({PLACEHOLDER} from the {origin})" if origin else ""
        raise DataError(f"{toml_path}: path {target} does not exist{via}")
    return target


def _load_format(toml_path: Path, fmt: str, target: Path, options: dict) -> Dataset:
    if fmt == "split-folder":
        return split_folder.load_split_folder(target, **options)
    if fmt == "npz":
        return npz.load_npz(target, **options)
    paths = tables.tables_in_folder(target) if target.is_dir() else [target]
    return tables.load_tables(paths, **options)
