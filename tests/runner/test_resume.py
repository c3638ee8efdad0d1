"""A run SIGKILLed mid-way and started again loses no cell, duplicates none, recomputes none."""

import os
import re
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import psutil

from .helpers import write_spec

TESTS = Path(__file__).resolve().parents[1]
N_CELLS = 12  # 2 entities x 2 variants x 3 seeds


def _start(spec: Path, out: Path) -> subprocess.Popen:
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")]),
    }
    cmd = [
        sys.executable,
        "-m",
        "benchkit.cli",
        "run",
        str(spec),
        "--out",
        str(out),
        "--workers",
        "1",
        "--quiet",
    ]
    return subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)


def _finished(out: Path) -> dict[str, tuple]:
    db = out / "results.sqlite"
    if not db.exists():
        return {}
    conn = sqlite3.connect(f"file:{db}?mode=ro", uri=True, timeout=10)
    try:
        rows = conn.execute("SELECT cell_key, run_id, finished_at FROM cells WHERE status = 'ok'")
        return {key: (run_id, at) for key, run_id, at in rows}
    except sqlite3.OperationalError:  # schema not created yet
        return {}
    finally:
        conn.close()


def test_sigkill_then_resume(tmp_path):
    detectors = [
        {"name": "runner.plugins:Sleepy", "label": "slow-a", "params": {"pause": 0.3}},
        {"name": "runner.plugins:Sleepy", "label": "slow-b", "params": {"pause": 0.4}},
    ]
    spec = write_spec(tmp_path / "spec.toml", detectors, seeds=[0, 1, 2])
    out = tmp_path / "out"
    proc = _start(spec, out)
    deadline = time.monotonic() + 120
    while len(_finished(out)) < 3:
        assert proc.poll() is None, proc.communicate()
        assert time.monotonic() < deadline, "the run did not get going"
        time.sleep(0.05)
    workers = psutil.Process(proc.pid).children(recursive=True)
    os.kill(proc.pid, signal.SIGKILL)
    proc.communicate(timeout=60)  # EOF on its pipes: no worker holds them open any more
    before_kill = _finished(out)
    assert 3 <= len(before_kill) < N_CELLS
    # workers notice that their driver is gone and exit; nothing keeps running
    _, alive = psutil.wait_procs(workers, timeout=10)
    assert not alive

    proc = _start(spec, out)
    stdout, stderr = proc.communicate(timeout=300)
    assert proc.returncode == 0, stderr
    counts = re.search(r"(\d+) cells: (\d+) computed, (\d+) cached", stdout)
    assert counts, stdout
    n_cells, n_computed, n_cached = map(int, counts.groups())
    assert n_cells == N_CELLS and n_cached == len(before_kill) and n_computed == N_CELLS - n_cached

    after = _finished(out)
    assert len(after) == N_CELLS
    for key, stamp in before_kill.items():
        assert after[key] == stamp  # finished before the kill: not recomputed
    with sqlite3.connect(out / "results.sqlite") as conn:
        assert conn.execute("SELECT COUNT(*), COUNT(DISTINCT cell_key) FROM cells").fetchone() == (
            N_CELLS,
            N_CELLS,
        )
        per_cell = conn.execute("SELECT COUNT(*) FROM metrics GROUP BY cell_key").fetchall()
        last_run = conn.execute("SELECT MAX(run_id) FROM runs").fetchone()[0]
        grid = conn.execute(
            "SELECT COUNT(*) FROM run_cells WHERE run_id = ?", (last_run,)
        ).fetchone()[0]
    assert len(per_cell) == N_CELLS and len(set(per_cell)) == 1  # same metric rows per cell
    assert grid == N_CELLS
    assert sorted(p.suffix for p in (out / "scores").iterdir()) == [".npz"] * N_CELLS
