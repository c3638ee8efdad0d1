"""The results store: SQLite (WAL) at ``OUT/results.sqlite`` plus a score cache ``OUT/scores/``.

Tables
------
``runs``          one row per ``benchkit run``: spec (TOML and JSON), environment, start/finish.
``run_cells``     the grid of a run: which cell keys it comprises and under which variant label.
``cells``         one row per computed cell (primary key: the cell key); status, error, timings.
``metrics``       long form ``(cell_key, threshold, metric, value)``.
``cell_thresholds``  the thresholds a cell's metrics used, and POT fit details.
``fingerprints``  dataset entity fingerprints per run.
``training``      the training record of cells whose detector trains epoch by epoch (JSON).

Only the driver process writes. Each cell is written as one transaction, after its score file
has been written under a temporary name and renamed, so a run killed at any moment leaves either
a complete cell or none. A cell counts as done when its row says ``ok`` and its score file exists.
"""

from __future__ import annotations

import contextlib
import fcntl
import json
import os
import sqlite3
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from benchkit.errors import DataError

DB_NAME = "results.sqlite"
SCORES_DIR = "scores"
SCHEMA_VERSION = "1"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS runs (
    run_id INTEGER PRIMARY KEY AUTOINCREMENT,
    name TEXT NOT NULL,
    started_at TEXT NOT NULL,
    finished_at TEXT,
    spec_toml TEXT NOT NULL,
    spec_json TEXT NOT NULL,
    environment TEXT NOT NULL,
    summary TEXT
);
CREATE TABLE IF NOT EXISTS run_cells (
    run_id INTEGER NOT NULL,
    cell_key TEXT NOT NULL,
    variant TEXT NOT NULL,
    PRIMARY KEY (run_id, cell_key)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS cells (
    cell_key TEXT PRIMARY KEY,
    detector TEXT NOT NULL,
    params TEXT NOT NULL,
    dataset TEXT NOT NULL,
    entity TEXT NOT NULL,
    entity_fingerprint TEXT NOT NULL,
    seed INTEGER NOT NULL,
    perturbation TEXT NOT NULL,
    noise_kind TEXT NOT NULL,
    noise_level REAL NOT NULL,
    noise_apply TEXT NOT NULL,
    scaling TEXT NOT NULL,
    protocol_version INTEGER NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('ok', 'failed', 'timeout')),
    error TEXT,
    fit_seconds REAL,
    score_seconds REAL,
    attribute_seconds REAL,
    points_per_second REAL,
    peak_memory_mb REAL,
    n_train INTEGER,
    n_test INTEGER,
    warmup INTEGER,
    evaluation TEXT,
    run_id INTEGER NOT NULL,
    finished_at TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS metrics (
    cell_key TEXT NOT NULL,
    threshold TEXT NOT NULL,
    metric TEXT NOT NULL,
    value REAL,
    PRIMARY KEY (cell_key, threshold, metric)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS cell_thresholds (
    cell_key TEXT NOT NULL,
    name TEXT NOT NULL,
    value REAL,
    PRIMARY KEY (cell_key, name)
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS training (
    cell_key TEXT PRIMARY KEY,
    record TEXT NOT NULL
) WITHOUT ROWID;
CREATE TABLE IF NOT EXISTS fingerprints (
    run_id INTEGER NOT NULL,
    dataset TEXT NOT NULL,
    entity TEXT NOT NULL,
    fingerprint TEXT NOT NULL,
    PRIMARY KEY (run_id, dataset, entity)
) WITHOUT ROWID;
"""

_CELL_ID = ("dataset", "entity", "seed", "perturbation", "noise_kind", "noise_level", "noise_apply")
MEASURE_COLUMNS = (
    "fit_seconds",
    "score_seconds",
    "attribute_seconds",
    "points_per_second",
    "peak_memory_mb",
    "n_train",
    "n_test",
    "warmup",
)
"""What a cell measures, as columns of ``cells`` (given to :class:`CellRecord` as a mapping)."""

CELL_COLUMNS = (
    "cell_key",
    "detector",
    "params",
    "entity_fingerprint",
    *_CELL_ID,
    "scaling",
    "protocol_version",
    "status",
    "error",
    *MEASURE_COLUMNS,
    "evaluation",
    "run_id",
    "finished_at",
)
_FRAME_CELL_COLUMNS = ("cell_key", "variant", "detector", "params", *_CELL_ID, "status", "error",
                       *MEASURE_COLUMNS[:-1])  # fmt: skip
_METRIC_FRAME_COLUMNS = ("cell_key", "variant", "detector", *_CELL_ID, "threshold", "metric",
                         "value")  # fmt: skip


def _now() -> str:
    return datetime.now(UTC).isoformat(timespec="milliseconds")


@dataclass
class CellRecord:
    """The ``cells`` row of one finished cell (see the module docstring)."""

    cell_key: str
    detector: str
    params: str
    dataset: str
    entity: str
    entity_fingerprint: str
    seed: int
    perturbation: str
    noise_kind: str
    noise_level: float
    noise_apply: str
    scaling: str
    protocol_version: int
    status: str
    error: str | None = None
    measures: Mapping[str, Any] = field(default_factory=dict)
    evaluation: str | None = None

    def row(self, run_id: int) -> dict[str, Any]:
        """The ``cells`` row: identity, status, the :data:`MEASURE_COLUMNS` (missing = NULL)."""
        row = {k: v for k, v in self.__dict__.items() if k != "measures"}
        row.update({k: self.measures.get(k) for k in MEASURE_COLUMNS})
        return {**row, "run_id": run_id, "finished_at": _now()}


class Store:
    """Read and write one results folder ``OUT``.

    Parameters
    ----------
    out : the results folder.
    create : create the folder and database when missing; otherwise a missing database is an
        input error naming the path.
    """

    def __init__(self, out: Path | str, *, create: bool = False) -> None:
        self.out = Path(out)
        self.db_path = self.out / DB_NAME
        self.scores_dir = self.out / SCORES_DIR
        if create:
            self.scores_dir.mkdir(parents=True, exist_ok=True)
        elif not self.db_path.is_file():
            raise DataError(
                f"{self.out}: no {DB_NAME} here (not a benchkit results folder)"
            )
        self._conn = sqlite3.connect(self.db_path, isolation_level=None, timeout=30.0)
        self._conn.execute("PRAGMA journal_mode=WAL")
        self._conn.execute("PRAGMA synchronous=NORMAL")
        if create:
            self._conn.executescript(_SCHEMA)
            self._conn.execute(
                "INSERT OR IGNORE INTO meta (key, value) VALUES ('schema_version', ?)",
                (SCHEMA_VERSION,),
            )
        self._add_missing_columns()

    def _add_missing_columns(self) -> None:
        """Columns added after a results folder was written get NULL in its old rows."""
        have = {row[1] for row in self._conn.execute("PRAGMA table_info(cells)")}
        if have and "attribute_seconds" not in have:
            self._conn.execute("ALTER TABLE cells ADD COLUMN attribute_seconds REAL")

    # -- plumbing ----------------------------------------------------------------------------
    def close(self) -> None:
        self._conn.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def _transaction(self) -> _Transaction:
        return _Transaction(self._conn)

    def score_path(self, cell_key: str) -> Path:
        return self.scores_dir / f"{cell_key}.npz"

    def remove_partial_files(self) -> int:
        """Delete score files left half-written by a killed run; return how many."""
        removed = 0
        for p in self.scores_dir.glob("*.tmp*"):
            p.unlink(missing_ok=True)
            removed += 1
        return removed

    # -- writing (driver only) ---------------------------------------------------------------
    def begin_run(
        self,
        name: str,
        spec_toml: str,
        spec: Mapping[str, Any],
        environment: Mapping[str, Any],
        fingerprints: Mapping[tuple[str, str], str],
        grid: Iterable[tuple[str, str]],
    ) -> int:
        """Record a run, its dataset fingerprints and its grid of ``(cell_key, variant)``."""
        with self._transaction() as c:
            cur = c.execute(
                "INSERT INTO runs (name, started_at, spec_toml, spec_json, environment) "
                "VALUES (?, ?, ?, ?, ?)",
                (
                    name,
                    _now(),
                    spec_toml,
                    json.dumps(spec, sort_keys=True),
                    json.dumps(environment),
                ),
            )
            run_id = int(cur.lastrowid)
            c.executemany(
                "INSERT INTO fingerprints (run_id, dataset, entity, fingerprint) "
                "VALUES (?, ?, ?, ?)",
                [(run_id, d, e, fp) for (d, e), fp in fingerprints.items()],
            )
            c.executemany(
                "INSERT INTO run_cells (run_id, cell_key, variant) VALUES (?, ?, ?)",
                [(run_id, key, variant) for key, variant in grid],
            )
        return run_id

    def finish_run(self, run_id: int, summary: Mapping[str, Any]) -> None:
        with self._transaction() as c:
            c.execute(
                "UPDATE runs SET finished_at = ?, summary = ? WHERE run_id = ?",
                (_now(), json.dumps(summary), run_id),
            )

    def write_cell(
        self,
        record: CellRecord,
        run_id: int,
        scores: Mapping[str, np.ndarray] | None,
        metrics: Mapping[tuple[str, str], float],
        thresholds: Mapping[str, float],
        training: Mapping[str, Any] | None = None,
    ) -> None:
        """Write a finished cell: its score file first (atomic rename), then one transaction.

        ``training`` is the detector's training record (see ``Detector.training_record``)."""
        if scores is not None:
            self._write_scores(record.cell_key, scores)
        row = record.row(run_id)
        with self._transaction() as c:
            c.execute(
                f"INSERT OR REPLACE INTO cells ({', '.join(CELL_COLUMNS)}) "
                f"VALUES ({', '.join('?' * len(CELL_COLUMNS))})",
                [row[k] for k in CELL_COLUMNS],
            )
            self._replace_evaluation(c, record.cell_key, metrics, thresholds)
            c.execute("DELETE FROM training WHERE cell_key = ?", (record.cell_key,))
            if training is not None:
                c.execute(
                    "INSERT INTO training (cell_key, record) VALUES (?, ?)",
                    (record.cell_key, json.dumps(dict(training), allow_nan=True)),
                )

    def write_evaluation(
        self,
        cell_key: str,
        evaluation: str,
        metrics: Mapping[tuple[str, str], float],
        thresholds: Mapping[str, float],
    ) -> None:
        """Replace the metrics of an already computed cell (recomputed from its cached scores)."""
        with self._transaction() as c:
            c.execute("UPDATE cells SET evaluation = ? WHERE cell_key = ?", (evaluation, cell_key))
            self._replace_evaluation(c, cell_key, metrics, thresholds)

    @staticmethod
    def _replace_evaluation(c: sqlite3.Connection, key: str, metrics, thresholds) -> None:
        c.execute("DELETE FROM metrics WHERE cell_key = ?", (key,))
        c.execute("DELETE FROM cell_thresholds WHERE cell_key = ?", (key,))
        c.executemany(
            "INSERT INTO metrics (cell_key, threshold, metric, value) VALUES (?, ?, ?, ?)",
            [(key, t, m, _real(v)) for (t, m), v in metrics.items()],
        )
        c.executemany(
            "INSERT INTO cell_thresholds (cell_key, name, value) VALUES (?, ?, ?)",
            [(key, n, _real(v)) for n, v in thresholds.items()],
        )

    def _write_scores(self, cell_key: str, scores: Mapping[str, np.ndarray]) -> None:
        final = self.score_path(cell_key)
        tmp = final.with_name(f"{final.name}.tmp{os.getpid()}")
        with open(tmp, "wb") as fh:
            np.savez_compressed(fh, **scores)
        os.replace(tmp, final)

    # -- reading ------------------------------------------------------------------------------
    def completed(self) -> dict[str, str | None]:
        """``cell_key -> evaluation hash`` of every ``ok`` cell whose score file exists."""
        rows = self._conn.execute("SELECT cell_key, evaluation FROM cells WHERE status = 'ok'")
        return {k: ev for k, ev in rows if self.score_path(k).is_file()}

    def run_ids(self) -> list[int]:
        return [r[0] for r in self._conn.execute("SELECT run_id FROM runs ORDER BY run_id")]

    def _run_id(self, run_id: int | None) -> int:
        if run_id is not None:
            return run_id
        ids = self.run_ids()
        if not ids:
            raise DataError(f"{self.db_path}: holds no run")
        return ids[-1]

    def latest_run(self) -> dict[str, Any]:
        """The latest run: ``run_id``, ``name``, ``spec``, ``spec_toml``, ``environment``,
        ``fingerprints`` (``"dataset/entity" -> sha256``), ``started_at``, ``finished_at``,
        ``summary``."""
        run_id = self._run_id(None)
        row = self._conn.execute(
            "SELECT name, spec_toml, spec_json, environment, started_at, finished_at, summary "
            "FROM runs WHERE run_id = ?",
            (run_id,),
        ).fetchone()
        fps = self._conn.execute(
            "SELECT dataset, entity, fingerprint FROM fingerprints WHERE run_id = ? "
            "ORDER BY dataset, entity",
            (run_id,),
        )
        return {
            "run_id": run_id,
            "name": row[0],
            "spec_toml": row[1],
            "spec": json.loads(row[2]),
            "environment": json.loads(row[3]),
            "started_at": row[4],
            "finished_at": row[5],
            "summary": json.loads(row[6]) if row[6] else None,
            "fingerprints": {f"{d}/{e}": fp for d, e, fp in fps},
        }

    def cells_frame(self, run_id: int | None = None) -> pd.DataFrame:
        """One row per computed cell of a run (default: the latest), columns as in internals.md."""
        cols = ", ".join(
            ("rc.variant" if c == "variant" else f"c.{c}") for c in _FRAME_CELL_COLUMNS
        )
        sql = (
            f"SELECT {cols} FROM run_cells rc JOIN cells c ON c.cell_key = rc.cell_key "
            "WHERE rc.run_id = ? ORDER BY rc.variant, c.dataset, c.entity, c.seed, c.noise_kind, "
            "c.noise_level, c.noise_apply"
        )
        rows = self._conn.execute(sql, (self._run_id(run_id),)).fetchall()
        return pd.DataFrame(rows, columns=list(_FRAME_CELL_COLUMNS))

    def metrics_frame(self, run_id: int | None = None) -> pd.DataFrame:
        """Long frame of every metric of a run's ok cells (default: the latest run)."""
        cols = ", ".join(
            "rc.variant"
            if c == "variant"
            else ("m." + c if c in ("threshold", "metric", "value") else "c." + c)
            for c in _METRIC_FRAME_COLUMNS
        )
        sql = (
            f"SELECT {cols} FROM run_cells rc JOIN cells c ON c.cell_key = rc.cell_key "
            "JOIN metrics m ON m.cell_key = c.cell_key WHERE rc.run_id = ? AND c.status = 'ok' "
            "ORDER BY rc.variant, c.dataset, c.entity, c.seed, c.noise_kind, c.noise_level, "
            "c.noise_apply, m.threshold, m.metric"
        )
        rows = self._conn.execute(sql, (self._run_id(run_id),)).fetchall()
        frame = pd.DataFrame(rows, columns=list(_METRIC_FRAME_COLUMNS))
        frame["value"] = frame["value"].astype(np.float64)
        return frame

    def training_frame(self, run_id: int | None = None) -> pd.DataFrame:
        """One row per ok cell of a run (default: the latest) that has a training record.

        Columns ``cell_key, variant, detector, dataset, entity, seed, perturbation`` and
        ``record`` (the dict the detector returned; see ``Detector.training_record``).
        """
        cols = ["cell_key", "variant", "detector", "dataset", "entity", "seed", "perturbation"]
        has_table = self._conn.execute(
            "SELECT 1 FROM sqlite_master WHERE type = 'table' AND name = 'training'"
        ).fetchone()
        if not has_table:  # a results folder written before training records existed
            return pd.DataFrame(columns=[*cols, "record"])
        select = ", ".join("rc.variant" if c == "variant" else f"c.{c}" for c in cols)
        sql = (
            f"SELECT {select}, t.record FROM run_cells rc JOIN cells c ON c.cell_key = rc.cell_key "
            "JOIN training t ON t.cell_key = c.cell_key WHERE rc.run_id = ? AND c.status = 'ok' "
            "ORDER BY rc.variant, c.dataset, c.entity, c.seed, c.perturbation"
        )
        rows = self._conn.execute(sql, (self._run_id(run_id),)).fetchall()
        return pd.DataFrame(
            [(*r[:-1], json.loads(r[-1])) for r in rows], columns=[*cols, "record"]
        )

    def cell(self, cell_key: str) -> dict[str, Any] | None:
        """The ``cells`` row of one key as a dict, or ``None``."""
        cur = self._conn.execute(
            f"SELECT {', '.join(CELL_COLUMNS)} FROM cells WHERE cell_key = ?", (cell_key,)
        )
        row = cur.fetchone()
        return dict(zip(CELL_COLUMNS, row, strict=True)) if row else None

    def load_scores(self, cell_key: str) -> dict[str, Any]:
        """Cached scores of a cell and the thresholds its metrics used.

        Keys: ``test_scores``, ``train_scores``, ``labels``, ``warmup``, ``threshold_oracle_f1``
        (and the other oracle thresholds), ``threshold_pot``, ``threshold_quantile``, and the POT
        fit details ``pot_*``.
        """
        path = self.score_path(cell_key)
        if not path.is_file():
            raise DataError(f"{path}: no cached scores for cell {cell_key}")
        with np.load(path) as z:
            out: dict[str, Any] = {k: z[k] for k in z.files}
        if "warmup" in out:
            out["warmup"] = int(out["warmup"])
        rows = self._conn.execute(
            "SELECT name, value FROM cell_thresholds WHERE cell_key = ?", (cell_key,)
        )
        out.update({n: (np.nan if v is None else float(v)) for n, v in rows})
        return out


class _Transaction:
    """``BEGIN IMMEDIATE`` ... ``COMMIT`` (rollback on error) on an autocommit connection."""

    def __init__(self, conn: sqlite3.Connection) -> None:
        self.conn = conn

    def __enter__(self) -> sqlite3.Connection:
        self.conn.execute("BEGIN IMMEDIATE")
        return self.conn

    def __exit__(self, exc_type, exc, tb) -> None:
        self.conn.execute("ROLLBACK" if exc_type else "COMMIT")


def _real(v: Any) -> float | None:
    """SQLite stores NaN as NULL; keep that explicit."""
    f = float(v)
    return None if np.isnan(f) else f


LOCK_NAME = ".writer.lock"


@contextlib.contextmanager
def writer_lock(out: Path | str):
    """Hold the results folder's writer lock for the block; one writing command at a time.

    A second ``benchkit run`` or ``rescore`` on the same OUT stops at once with one line
    instead of interleaving cells. The lock is an ``flock`` on ``OUT/.writer.lock``, so the
    kernel releases it when the holder dies, even by SIGKILL: a killed run can be resumed.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    handle = open(out / LOCK_NAME, "a+b")  # noqa: SIM115 - closed in the finally below
    try:
        try:
            fcntl.flock(handle.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError:
            raise DataError(
                f"{out}: another benchkit command is writing this results folder; "
                "wait for it to finish or choose another --out"
            ) from None
        yield
    finally:
        handle.close()
