"""Per-row latency of ``benchkit apply --follow`` beside batch scoring throughput, per detector.

For each detector: fit on the first ``--train`` rows of one public server-machine entity (Su et
al., KDD 2019; read from ../shared/data/public, or $BENCHKIT_PUBLIC_DATA) or, without it, on the
invented demo data; build a bundle in memory (scaler, context, calibration scores, POT
threshold) and measure

* batch: rows per second of scoring ``--rows`` test rows at once with a fixed threshold;
* follow: the time from a text line to its written output line (parse, scale, score the
  ``warmup + 1``-row window, format), per row over ``--stream`` rows: median and 99th
  percentile in milliseconds, with the fixed threshold and with SPOT updates (a peak refits
  the GPD tail, which is what the SPOT 99th percentile shows).

The last column is batch rows/s over the rows/s the follow median allows (what scoring one row
at a time costs against scoring a backlog at once). Wall-clock timings on a shared machine
are noisy.

    .venv/bin/python benchmarks/apply_latency.py [--train 3000] [--rows 3000] [--stream 400]
"""

from __future__ import annotations

import argparse
import io
import os
import time
import warnings
from pathlib import Path

import numpy as np
from tabulate import tabulate

from benchkit import registry
from benchkit.deploy.apply import LineWriter
from benchkit.deploy.bundle import Bundle
from benchkit.deploy.rows import RowReader
from benchkit.deploy.scoring import BatchScorer, StreamScorer, pin_numerics
from benchkit.thresholds import calibration_scores, pot_threshold
from benchkit.windows import Scaler

TORCH_BUDGET = {"max_epochs": 1, "max_train_windows": 256}
DETECTORS = (
    ("step-change", {}),
    ("pca-residual", {}),
    ("correlation-break", {}),
    ("shape-clusters", {}),
    ("isolation-forest", {}),
    ("pyod:ECOD", {}),
    ("pyod:KNN", {}),
    ("lstm-vae", TORCH_BUDGET),
    ("factorized-vae", TORCH_BUDGET),
)


def entity_data(n_train: int, n_test: int):
    """(name, train, test, channels) of one public entity, else of the demo."""
    from benchkit.data import load

    root = Path(os.environ.get("BENCHKIT_PUBLIC_DATA", "../shared/data/public"))
    folder = root / "server-machines"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if folder.is_dir():
            entity = load(str(folder)).entity("machine-1-6")
            name = "server-machine data (Su et al., KDD 2019), machine-1-6"
        else:
            entity = load("demo").entities[0]
            name = f"invented demo data, {entity.name}"
    return name, entity.train[:n_train], entity.test[:n_test], entity.channels


def in_memory_bundle(name: str, params: dict, train: np.ndarray, channels) -> Bundle:
    """Fit ``name`` as the protocol does and wrap it like a bundle read back from disk."""
    scaler = Scaler("zscore").fit(train)
    scaled = scaler.transform(train)
    detector = registry.create(name, **params).fit(scaled)
    warmup = int(detector.warmup)
    calib = calibration_scores(detector.score(scaled), warmup)
    pot = pot_threshold(calib)
    manifest = {
        "detector": {"name": name, "warmup": warmup},
        "entity": {"channels": list(channels)},
        "threshold": {"strategy": "pot", "value": pot.threshold,
                      "calibration": {"pot_risk": 1e-3, "pot_initial_quantile": 0.98}},
        "stream": {"window_local": True},
    }  # fmt: skip
    context = train[train.shape[0] - warmup :]
    return Bundle(Path("<memory>"), manifest, detector, scaler, context, calib)


def follow_ms(bundle: Bundle, lines: list[str], update: str) -> np.ndarray:
    """Milliseconds from each text line to its written output line."""
    reader = RowReader(bundle.channels, "<bench>")
    stream = StreamScorer(bundle, update)
    writer = LineWriter(io.StringIO(), "csv", culprits=False)
    writer.start()
    times = np.empty(len(lines))
    for i, line in enumerate(lines):  # the per-row path itself is what is measured
        t0 = time.perf_counter_ns()
        row = reader.parse(line, i + 1)
        writer.row(*stream.push(row))
        times[i] = time.perf_counter_ns() - t0
    return times / 1e6


def measure(bundle: Bundle, test: np.ndarray, n_stream: int) -> tuple[float, ...]:
    """Batch rows/s, then median and p99 ms per row of follow with a fixed and a SPOT threshold."""
    scorer = BatchScorer(bundle)
    scorer.run(test[:64])  # warm caches and lazy imports outside the timing
    start = time.perf_counter()
    scorer.run(test)
    batch_rate = test.shape[0] / (time.perf_counter() - start)
    lines = [",".join(repr(float(v)) for v in row) for row in test[:n_stream]]
    fixed, spot = follow_ms(bundle, lines, "fixed"), follow_ms(bundle, lines, "spot")
    return (batch_rate, float(np.median(fixed)), float(np.quantile(fixed, 0.99)),
            float(np.median(spot)), float(np.quantile(spot, 0.99)))  # fmt: skip


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--train", type=int, default=3000)
    parser.add_argument("--rows", type=int, default=3000)
    parser.add_argument("--stream", type=int, default=400)
    args = parser.parse_args()
    pin_numerics()
    name, train, test, channels = entity_data(args.train, args.rows)
    print(f"data: {name}; {train.shape[0]} train rows, {train.shape[1]} KPIs; batch of "
          f"{test.shape[0]} rows, follow over {args.stream} rows; one thread")  # fmt: skip
    rows = []
    for det, params in DETECTORS:
        bundle = in_memory_bundle(det, params, train, channels)
        batch_rate, median, p99, spot_median, spot_p99 = measure(bundle, test, args.stream)
        rows.append((det, bundle.warmup, f"{batch_rate:,.0f}", f"{median:.3f}", f"{p99:.3f}",
                     f"{spot_median:.3f}", f"{spot_p99:.3f}",
                     f"{batch_rate * median / 1000.0:.1f}"))  # fmt: skip
    headers = ("detector", "warmup", "batch rows/s", "follow ms median", "follow ms p99",
               "+SPOT ms median", "+SPOT ms p99", "batch/follow")  # fmt: skip
    print(tabulate(rows, headers=headers, tablefmt="github", disable_numparse=True))
    print("wall clock on a shared machine: timings are noisy")


if __name__ == "__main__":
    main()
