"""A Dask cluster of separate processes on 127.0.0.1: a scheduler and worker commands.

For trying the cluster path on one machine and for measuring it: the scheduler and each worker
are separate commands, as they would be on a real cluster, reachable on loopback only.
:class:`LoopbackCluster` stops every process it started, also when the block raises.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

SCHEDULER_ENV = {
    # what benchkit's LocalCluster sets (benchkit.daskworker.SCHEDULER_CONFIG), as Dask reads it
    # from the environment of a scheduler started on its own
    "DASK_DISTRIBUTED__SCHEDULER__ALLOWED_FAILURES": "0",
    "DASK_DISTRIBUTED__SCHEDULER__WORKER_SATURATION": "1.0",
}


class LoopbackCluster:
    """``with LoopbackCluster(workers) as cluster:`` a scheduler and worker commands on loopback.

    Parameters
    ----------
    workers : one entry per worker command: ``"benchkit"`` (``benchkit worker --nworkers 1``)
        or ``"dask"`` (a plain ``dask worker --nworkers 1 --nthreads 1``, without benchkit's
        preload: benchkit's worker plug-in has to set it up; started with the pinned numeric
        environment, as the README tells users, since Dask loads numpy before any plug-in).
    env : extra environment variables for every process (``PYTHONPATH`` for plug-ins, say).
    start_timeout : seconds to wait for the scheduler and every worker to connect.
    idle_timeout : the scheduler stops after this many seconds without work, and its workers
        30 s later, in case this process dies without stopping them.

    ``address`` is the scheduler's ``tcp://127.0.0.1:PORT``; ``worker_pids()`` maps each worker
    address to the process id of its worker process.
    """

    def __init__(
        self,
        workers: list[str],
        env: dict[str, str] | None = None,
        start_timeout: float = 120.0,
        idle_timeout: float = 600.0,
    ) -> None:
        self.kinds = list(workers)
        self.env = {**os.environ, **(env or {})}
        self.start_timeout = start_timeout
        self.idle_timeout = idle_timeout
        self.address = ""
        self.processes: list[subprocess.Popen] = []
        self._tmp: tempfile.TemporaryDirectory | None = None

    def _spawn(self, argv: list[str], env: dict[str, str], name: str) -> subprocess.Popen:
        assert self._tmp is not None
        log = open(Path(self._tmp.name) / f"{name}.log", "w")  # noqa: SIM115 - closed with it
        proc = subprocess.Popen(
            argv, stdout=log, stderr=subprocess.STDOUT, env=env, start_new_session=True
        )
        log.close()
        self.processes.append(proc)
        return proc

    def logs(self) -> str:
        """Everything the started processes printed so far (for failure messages)."""
        if self._tmp is None:
            return ""
        return "\n".join(
            f"--- {p.name}\n{p.read_text(errors='replace')[-3000:]}"
            for p in sorted(Path(self._tmp.name).glob("*.log"))
        )

    def __enter__(self) -> LoopbackCluster:
        self._tmp = tempfile.TemporaryDirectory(prefix="benchkit-loopback-")
        try:
            self._start()
        except BaseException:
            self.close()
            raise
        return self

    def _start(self) -> None:
        assert self._tmp is not None
        file = Path(self._tmp.name) / "scheduler.json"
        py = sys.executable
        scheduler = [py, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
                     "--port", "0", "--no-dashboard", "--scheduler-file", str(file),
                     "--idle-timeout", f"{self.idle_timeout:g}s"]  # fmt: skip
        self._spawn(scheduler, {**self.env, **SCHEDULER_ENV}, "scheduler")
        deadline = time.monotonic() + self.start_timeout
        while not file.exists():
            self._check_alive(deadline, "the scheduler did not start")
            time.sleep(0.1)
        self.address = json.loads(file.read_text())["address"]
        for i, kind in enumerate(self.kinds):
            if kind == "benchkit":
                argv = [py, "-m", "benchkit.cli", "worker", self.address]
            elif kind == "dask":
                argv = [py, "-m", "distributed.cli.dask_worker", self.address, "--nthreads", "1",
                        "--no-dashboard"]  # fmt: skip
            else:
                raise ValueError(f"worker kind {kind!r}: expected 'benchkit' or 'dask'")
            argv += ["--nworkers", "1", "--host", "127.0.0.1", "--death-timeout", "30"]
            env = self.env
            if kind == "dask":  # as the README tells users: the pinned environment from the start
                from benchkit import numerics

                env = {**self.env, **numerics.worker_environ()}
            self._spawn(argv, env, f"worker-{i}-{kind}")
        from distributed import Client

        with Client(self.address, timeout="30s") as client:
            while len(client.scheduler_info(n_workers=-1)["workers"]) < len(self.kinds):
                self._check_alive(deadline, "the workers did not all connect")
                time.sleep(0.2)

    def _check_alive(self, deadline: float, what: str) -> None:
        dead = [p for p in self.processes if p.poll() is not None]
        if dead or time.monotonic() > deadline:
            raise RuntimeError(f"loopback cluster: {what}\n{self.logs()}")

    def worker_pids(self) -> dict[str, int]:
        """Worker address -> process id of the worker process (not its nanny)."""
        from distributed import Client

        with Client(self.address, timeout="30s") as client:
            return client.run(os.getpid)

    def close(self) -> None:
        """SIGTERM every started process group, SIGKILL what is left after 10 s."""
        for proc in reversed(self.processes):
            if proc.poll() is None:
                _signal_group(proc, signal.SIGTERM)
        deadline = time.monotonic() + 10
        for proc in reversed(self.processes):
            try:
                proc.wait(max(0.1, deadline - time.monotonic()))
            except subprocess.TimeoutExpired:
                pass
            _signal_group(proc, signal.SIGKILL)  # leftovers of the group (a worker process)
            proc.wait()
        self.processes.clear()
        if self._tmp is not None:
            self._tmp.cleanup()
            self._tmp = None

    def __exit__(self, *exc: Any) -> None:
        self.close()


def _signal_group(proc: subprocess.Popen, sig: int) -> None:
    try:
        os.killpg(proc.pid, sig)
    except (ProcessLookupError, PermissionError):
        pass
