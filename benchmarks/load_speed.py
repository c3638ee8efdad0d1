"""How fast the split-folder loader reads a server-machine-sized dataset.

Writes 28 entities of 25,000 x 38 (train and test) plus labels into a temporary folder, in the
split-folder layout, then times ``benchkit.data.load`` on the whole folder (median of repeats)
beside a bare ``pandas.read_csv`` of the same files (the parsing floor: what validation costs)
and ``numpy.loadtxt`` on one entity (scaled to 28), and prints the ratios.

    .venv/bin/python benchmarks/load_speed.py [--entities 28] [--rows 25000] [--repeats 3]
"""

from __future__ import annotations

import argparse
import shutil
import statistics
import tempfile
import time
import warnings
from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.data import load

TARGET_SECONDS = 10.0


def write_folder(root: Path, n_entities: int, rows: int, channels: int, seed: int = 0) -> int:
    """Write the layout; each entity gets copies of one train and one test text (bytes written)."""
    rng = np.random.default_rng(seed)
    for folder in ("train", "test", "test_label"):
        (root / folder).mkdir(parents=True)
    texts = {}
    for part in ("train", "test"):
        values = np.round(rng.random((rows, channels)), 6)
        values[rng.random((rows, channels)) < 0.2] = 0.0  # metric files hold many exact zeros
        path = root / part / "m-0.txt"
        pd.DataFrame(values).to_csv(path, header=False, index=False)
        texts[part] = path
    labels = (rng.random(rows) < 0.05).astype(int)
    (root / "test_label" / "m-0.txt").write_text("".join(f"{v}\n" for v in labels))
    texts["test_label"] = root / "test_label" / "m-0.txt"
    for k in range(1, n_entities):
        for folder, source in texts.items():
            shutil.copyfile(source, root / folder / f"m-{k}.txt")
    return n_entities * sum(p.stat().st_size for p in texts.values())


def time_it(fn, repeats: int) -> float:
    """Median wall time of ``fn()`` over ``repeats`` runs."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        times.append(time.perf_counter() - start)
    return statistics.median(times)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--entities", type=int, default=28)
    parser.add_argument("--rows", type=int, default=25_000)
    parser.add_argument("--channels", type=int, default=38)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        root = Path(tmp) / "server-machines"
        size = write_folder(root, args.entities, args.rows, args.channels)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            ours = time_it(lambda: load(str(root)), args.repeats)
        files = sorted(root.glob("*/*.txt"))
        floor = time_it(lambda: [pd.read_csv(p, header=None) for p in files], args.repeats)
        one = [root / f / "m-0.txt" for f in ("train", "test", "test_label")]
        baseline = time_it(lambda: [np.loadtxt(p, delimiter=",") for p in one], args.repeats)
        baseline_all = baseline * args.entities
    shape = f"{args.entities} entities x 2 x {args.rows} x {args.channels}"
    rows = [
        (f"benchkit.data.load (median of {args.repeats})", ours),
        (f"pandas.read_csv only (median of {args.repeats})", floor),
        (f"numpy.loadtxt (1 entity x {args.entities})", baseline_all),
    ]
    print(f"split-folder load, {shape} ({size / 1e6:.0f} MB of text)")
    print(f"{'reader':<34}{'seconds':>10}{'MB/s':>9}")
    for name, seconds in rows:
        print(f"{name:<34}{seconds:>10.2f}{size / 1e6 / seconds:>9.0f}")
    verdict = "met" if ours <= TARGET_SECONDS else "MISSED"
    print(
        f"ratios: benchkit / bare pandas parse {ours / floor:.2f}x, "
        f"numpy.loadtxt / benchkit {baseline_all / ours:.2f}x; "
        f"target <= {TARGET_SECONDS:.0f} s: {verdict}"
    )


if __name__ == "__main__":
    main()
