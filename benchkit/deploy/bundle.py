"""A model bundle: one fitted detector with its scaler, threshold and context, as plain files.

Layout of a bundle folder::

    manifest.json   what the bundle holds and where it came from (see :func:`manifest_digest`)
    model.npz       the fitted detector (``save(path)``; ``model.pt`` for torch detectors)
    context.npz     ``context``: the last ``warmup`` raw train rows; ``calibration``: the train
                    scores after the warm-up (the data a POT threshold was calibrated on)

The manifest lists every other file with its sha256 and carries ``digest`` = ``sha256:`` + hex
of the sha256 of the canonical JSON (sorted keys, no whitespace, UTF-8) of every other key.
:func:`load_bundle` refuses, with one line naming the bundle, a manifest whose digest or file
hashes do not match, an unknown format, and a torch detector saved under another torch version.
Nothing in a bundle is pickled.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from benchkit.errors import BenchkitInputError, DataError
from benchkit.windows import Scaler

BUNDLE_FORMAT = 1
MANIFEST = "manifest.json"
CONTEXT_FILE = "context.npz"


class BundleError(BenchkitInputError):
    """A bundle that cannot be used (tampered, incomplete, or for another environment)."""


def model_file_name(needs_torch: bool) -> str:
    """File name of the fitted detector inside a bundle."""
    return "model.pt" if needs_torch else "model.npz"


def file_sha256(path: Path) -> str:
    """sha256 hex of a file's bytes, read in 1 MiB blocks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(1 << 20), b""):
            h.update(block)
    return h.hexdigest()


def manifest_digest(manifest: dict[str, Any]) -> str:
    """``sha256:`` + hex digest of the canonical JSON of every key but ``digest``."""
    body = {k: v for k, v in manifest.items() if k != "digest"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def seal(folder: Path, manifest: dict[str, Any]) -> dict[str, Any]:
    """Add the file hashes and the digest to ``manifest`` and write ``folder/manifest.json``."""
    files = sorted(p.name for p in folder.iterdir() if p.is_file() and p.name != MANIFEST)
    manifest = {**manifest, "files": {name: file_sha256(folder / name) for name in files}}
    manifest["digest"] = manifest_digest(manifest)
    text = json.dumps(manifest, indent=2, sort_keys=True, allow_nan=False) + "\n"
    (folder / MANIFEST).write_text(text, encoding="utf-8")
    return manifest


def torch_version() -> str | None:
    """The installed torch version, or ``None`` without torch."""
    from importlib.metadata import PackageNotFoundError, version

    try:
        return version("torch")
    except PackageNotFoundError:
        return None


@dataclass
class Bundle:
    """A verified bundle, read back: the manifest, the fitted detector and its arrays."""

    path: Path
    manifest: dict[str, Any]
    detector: Any
    scaler: Scaler
    context: np.ndarray
    calibration: np.ndarray

    @property
    def channels(self) -> tuple[str, ...]:
        return tuple(self.manifest["entity"]["channels"])

    @property
    def warmup(self) -> int:
        return int(self.manifest["detector"]["warmup"])

    @property
    def threshold(self) -> dict[str, Any]:
        return self.manifest["threshold"]

    @property
    def rule(self) -> dict[str, Any]:
        """The run's ``constant_channels`` rule (``mode``, and ``kept`` or ``low``/``high``)."""
        return self.manifest.get("constant_channels", {"mode": "keep"})

    @property
    def detector_channels(self) -> tuple[str, ...]:
        """The KPIs the detector sees (all of them unless the rule drops some)."""
        if self.rule["mode"] == "drop":
            return tuple(self.channels[i] for i in self.rule["kept"])
        return self.channels

    def prepare(self, raw: np.ndarray, context: bool = False) -> np.ndarray:
        """Raw rows as the detector sees them: scaled, then the constant-channel rule applied
        as the protocol applies it (``clip`` bounds new rows only, never train context)."""
        scaled = self.scaler.transform(raw)
        mode = self.rule["mode"]
        if mode == "drop":
            return scaled[:, np.asarray(self.rule["kept"], dtype=np.int64)]
        if mode == "clip" and not context:
            return np.clip(scaled, np.asarray(self.rule["low"]), np.asarray(self.rule["high"]))
        return scaled


def _read_manifest(folder: Path) -> dict[str, Any]:
    if not folder.is_dir():
        raise BundleError(f"{folder}: no such bundle folder")
    path = folder / MANIFEST
    try:
        manifest = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise BundleError(f"{folder}: not a bundle (no {MANIFEST})") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise BundleError(f"{path}: not a readable manifest ({exc})") from None
    if not isinstance(manifest, dict) or manifest.get("benchkit_bundle") != BUNDLE_FORMAT:
        got = manifest.get("benchkit_bundle") if isinstance(manifest, dict) else None
        raise BundleError(
            f"{path}: bundle format {got!r}; this benchkit reads format {BUNDLE_FORMAT}"
        )
    if manifest.get("digest") != manifest_digest(manifest):
        raise BundleError(f"{path}: manifest digest does not match its content (edited?)")
    return manifest


def _check_files(folder: Path, manifest: dict[str, Any]) -> None:
    files = manifest.get("files")
    if not isinstance(files, dict) or not files:
        raise BundleError(f"{folder / MANIFEST}: lists no files")
    for name, digest in sorted(files.items()):
        path = folder / name
        if Path(name).name != name or not path.is_file():
            raise BundleError(f"{folder}: file {name!r} listed in the manifest is missing")
        if file_sha256(path) != digest:
            raise BundleError(f"{path}: sha256 does not match the manifest digest")


def _check_versions(folder: Path, manifest: dict[str, Any]) -> None:
    det = manifest["detector"]
    if not det.get("needs_torch"):
        return
    saved = manifest["versions"].get("torch")
    here = torch_version()
    if here != saved:
        raise BundleError(
            f"{folder}: {det['name']} was saved with torch {saved}, this environment has "
            f"torch {here or '(none)'}; its scores reproduce only under the same torch"
        )


def load_bundle(path: str | Path) -> Bundle:
    """Read and verify a bundle folder; raise :class:`BundleError` (one line) when unusable."""
    from benchkit import registry

    folder = Path(path)
    manifest = _read_manifest(folder)
    _check_files(folder, manifest)
    _check_versions(folder, manifest)
    det = manifest["detector"]
    cls = registry.get(det["name"])
    try:
        detector = cls.load(folder / det["file"])
    except DataError as exc:
        raise BundleError(f"{folder}: {exc}") from None
    scaler = Scaler(manifest["scaler"]["method"])
    scaler.offset_ = np.asarray(manifest["scaler"]["offset"], dtype=np.float64)
    scaler.scale_ = np.asarray(manifest["scaler"]["scale"], dtype=np.float64)
    with np.load(folder / CONTEXT_FILE, allow_pickle=False) as z:
        context, calibration = z["context"], z["calibration"]
    n_channels = len(manifest["entity"]["channels"])
    if context.shape != (int(det["warmup"]), n_channels) or scaler.offset_.shape != (n_channels,):
        raise BundleError(f"{folder}: context or scaler do not match {n_channels} KPIs")
    return Bundle(folder, manifest, detector, scaler, context, calibration)
