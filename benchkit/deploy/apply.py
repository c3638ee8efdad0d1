"""``apply``: score raw KPI rows with a bundle and write one output line per row.

Output columns (CSV with a header, or one JSON object per line): ``step`` (0-based index of the
scored row), ``score``, ``threshold``, ``alert`` (``score >= threshold``), and ``culprits`` (the
top KPIs of each alert, ``;``-separated) when the detector offers ``attribute``. Numbers are
written with Python's shortest round-trip repr, so the text reads back to the same float64.
"""

from __future__ import annotations

import json
import sys
from collections.abc import Callable, Iterable
from typing import IO, Any

import numpy as np

from benchkit.deploy.bundle import Bundle
from benchkit.deploy.rows import RowProblem, RowReader
from benchkit.deploy.scoring import BatchScorer, StreamScorer, top_culprits
from benchkit.errors import BenchkitInputError, DataError

FORMATS = ("csv", "jsonl")
ON_BAD_ROW = ("stop", "skip")
COLUMNS = ("step", "score", "threshold", "alert")


class LineWriter:
    """Writes result lines as CSV (header first) or JSON lines to a text stream."""

    def __init__(self, out: IO[str], fmt: str, culprits: bool, flush: bool = False) -> None:
        self.out, self.fmt, self.culprits, self.flush = out, fmt, culprits, flush

    def start(self) -> None:
        """The CSV header (nothing for JSON lines)."""
        if self.fmt == "csv":
            header = COLUMNS + (("culprits",) if self.culprits else ())
            self._emit(",".join(header))

    def _emit(self, text: str) -> None:
        self.out.write(text + "\n")
        if self.flush:
            self.out.flush()

    def row(self, step: int, score: float, threshold: float, alert: bool,
            names: list[str] | None = None) -> None:  # fmt: skip
        if self.fmt == "csv":
            fields = [str(step), repr(float(score)), repr(float(threshold)), "1" if alert else "0"]
            if self.culprits:
                fields.append(";".join(names or ()))
            self._emit(",".join(fields))
            return
        record: dict[str, Any] = {"step": step, "score": float(score),
                                  "threshold": float(threshold), "alert": bool(alert)}  # fmt: skip
        if self.culprits:
            record["culprits"] = list(names or ())
        self._emit(json.dumps(record))


def _problem(source: str, problem: RowProblem, on_bad_row: str, warn: Callable[[str], None]):
    message = f"{source} line {problem.line}: {problem.message}"
    if on_bad_row == "stop":
        raise DataError(message + " (use --on-bad-row skip to skip such rows)")
    warn(f"benchkit: warning: {message}; row skipped")


def _warn(text: str) -> None:
    print(text, file=sys.stderr, flush=True)


def read_rows(bundle: Bundle, lines: Iterable[str], source: str, on_bad_row: str = "stop",
              warn: Callable[[str], None] = _warn) -> np.ndarray:  # fmt: skip
    """Every good row of text ``lines`` as an ``(n, d)`` array (bad rows stop or are skipped)."""
    reader = RowReader(bundle.channels, source)
    rows = []
    for item in reader.rows(lines):
        if isinstance(item, RowProblem):
            _problem(source, item, on_bad_row, warn)
            continue
        rows.append(item[1])
    if not rows:
        raise DataError(f"{source}: no rows to score")
    return np.vstack(rows)


def apply_batch(bundle: Bundle, raw: np.ndarray, writer: LineWriter, update: str = "fixed",
                depth: int = 0, top: int = 3) -> int:  # fmt: skip
    """Score all rows at once and write them; return the number of alerts."""
    scorer = BatchScorer(bundle)
    scores, thresholds, alerts = scorer.run(raw, update, depth)
    attributions = scorer.attributions(raw) if writer.culprits and alerts.any() else None
    writer.start()  # after scoring: a failure leaves no output at all
    for i in range(scores.size):  # formatting output lines, one per row
        names = None
        if attributions is not None and alerts[i]:
            names = top_culprits(attributions[i], bundle.detector_channels, top)
        writer.row(i, scores[i], thresholds[i], bool(alerts[i]), names)
    return int(np.count_nonzero(alerts))


def check_streamable(bundle: Bundle) -> None:
    """Refuse a bundle whose detector's score depends on more than its window (export measured
    it: ``manifest["stream"]``)."""
    if not bundle.manifest["stream"]["window_local"]:
        raise BenchkitInputError(
            f"{bundle.path}: {bundle.manifest['detector']['name']}'s score at a step depends on "
            f"more than its last {bundle.warmup + 1} rows, so --follow cannot reproduce the "
            "batch scores; apply it without --follow"
        )


def apply_follow(bundle: Bundle, lines: Iterable[str], source: str, writer: LineWriter,
                 update: str = "fixed", depth: int = 0, top: int = 3, on_bad_row: str = "stop",
                 warn: Callable[[str], None] = _warn) -> int:  # fmt: skip
    """Score rows as lines arrive, one output line each; return the number of alerts."""
    check_streamable(bundle)
    reader = RowReader(bundle.channels, source)
    stream = StreamScorer(bundle, update, depth)
    writer.start()
    alerts = 0
    for item in reader.rows(lines):
        if isinstance(item, RowProblem):
            _problem(source, item, on_bad_row, warn)
            continue
        step, score, theta, alert = stream.push(item[1])
        names = None
        if alert and writer.culprits:
            attribution = stream.attribution()
            if attribution is not None:
                names = top_culprits(attribution, bundle.detector_channels, top)
        writer.row(step, score, theta, alert, names)
        alerts += alert
    return alerts
