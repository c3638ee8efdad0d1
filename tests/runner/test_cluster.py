"""A real multi-process Dask cluster on 127.0.0.1: a scheduler and two worker commands.

One worker is started with ``benchkit worker``, the other with a plain ``dask worker`` (set up by
benchkit's worker plug-in). The run through ``scheduler = "tcp://127.0.0.1:PORT"`` must give the
local pool's metrics; a worker killed mid-run fails only the cell it was running, and the next
run computes just that cell.
"""

import os
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest

from benchkit.loopback import LoopbackCluster
from benchkit.runner import run_experiment
from benchkit.store import Store

from .helpers import tiny_spec

TESTS = Path(__file__).resolve().parents[1]
DETECTORS = [
    {"name": "random"},
    {"name": "pca-residual"},
    {"name": "runner.plugins:Echo", "label": "echo", "params": {"window": 3}},
    # long enough that one is surely running when the worker is killed
    {"name": "runner.plugins:Sleepy", "label": "sleepy", "params": {"pause": 4.0}},
]
N_CELLS = 2 * 4 * 2  # 2 demo entities x 4 variants x 2 seeds


def _frame(out: Path) -> pd.DataFrame:
    with Store(out) as store:
        return store.metrics_frame().drop(columns="cell_key")


def _statuses(out: Path) -> pd.DataFrame:
    with Store(out) as store:
        return store.cells_frame()[["cell_key", "variant", "status", "error"]]


# Run in a process of its own (its own Dask client): waits until a worker is executing a sleepy
# cell, SIGKILLs that worker process and prints its address.
KILLER = """
import os, signal, sys, time
from distributed import Client

def executing(dask_worker):
    names = []
    for ts in dask_worker.state.tasks.values():
        if ts.state == "executing":
            for arg in getattr(ts.run_spec, "args", ()):
                arg = getattr(arg, "value", arg)
                names.append(getattr(arg, "detector", ""))
    return names, os.getpid()

with Client(sys.argv[1], timeout="30s") as client:
    deadline = time.monotonic() + 90
    while time.monotonic() < deadline:
        for address, (names, pid) in client.run(executing).items():
            if "runner.plugins:Sleepy" in names:
                os.kill(pid, signal.SIGKILL)
                print(address)
                sys.exit(0)
        time.sleep(0.1)
sys.exit(1)
"""


@pytest.mark.slow
def test_loopback_cluster_matches_local_pool_and_survives_a_killed_worker(tmp_path):
    env = {"PYTHONPATH": os.pathsep.join([str(TESTS), os.environ.get("PYTHONPATH", "")])}
    spec = tiny_spec(DETECTORS, seeds=[0, 1])
    local = run_experiment(spec, tmp_path / "local", workers=2, quiet=True)
    assert local.n_computed == N_CELLS
    out = tmp_path / "cluster"
    with LoopbackCluster(["benchkit", "dask"], env=env) as cluster:
        killer = subprocess.Popen(
            [sys.executable, "-c", KILLER, cluster.address], stdout=subprocess.PIPE, text=True
        )
        first = run_experiment(spec, out, executor="dask", scheduler=cluster.address, quiet=True)
        killed = killer.communicate(timeout=60)[0].split()
        assert killer.returncode == 0 and killed, "no worker was seen running a sleepy cell"
        # the scheduler runs with allowed-failures 0 and worker-saturation 1.0 (LoopbackCluster):
        # the killed worker held exactly the cell it was running, and that cell alone failed
        cells = _statuses(out)
        failed = cells[cells.status != "ok"]
        assert first.n_failed == len(failed) == 1, cluster.logs()
        assert failed.variant.tolist() == ["sleepy"]
        assert "KilledWorker" in failed.error.iloc[0] and killed[0] in failed.error.iloc[0]
        # the nanny restarted the killed worker; the next run computes only the failed cell
        second = run_experiment(spec, out, executor="dask", scheduler=cluster.address, quiet=True)
    assert (second.n_computed, second.n_cached, second.n_failed) == (1, N_CELLS - 1, 0)
    # common practice, no source: the same cells on any executor give bit-identical metrics
    pd.testing.assert_frame_equal(_frame(out), _frame(tmp_path / "local"))
