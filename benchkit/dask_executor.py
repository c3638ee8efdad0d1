"""The Dask executor: cells on a Dask distributed cluster, or on a LocalCluster on loopback.

Every worker runs :func:`benchkit.daskworker.configure_process` before its first cell (a worker
plug-in registered before anything is submitted), so cells get the thread limits, numerics and
allocator settings of a local-pool worker; a LocalCluster's nannies also start their workers
without Dask's fixed malloc trim threshold, and its scheduler fails a cell whose worker dies
instead of retrying it elsewhere (see :data:`benchkit.daskworker.SCHEDULER_CONFIG`).

Dask has no hard stop for a cell stuck in one C call: such a cell is marked ``timeout`` only
when that call returns.

Numerics: a LocalCluster's worker processes get the numeric path's environment at their start
(Dask's ``distributed.nanny.pre-spawn-environ``); Dask sets it in the nanny's process, which for a
LocalCluster is the driver, so the driver's environment is put back once the workers are up. A
worker started elsewhere without that environment fails its cells with a message saying so.
"""

from __future__ import annotations

import os
import sys
from collections import deque
from collections.abc import Iterable, Iterator
from typing import Any

from benchkit import numerics
from benchkit.errors import SpecError
from benchkit.protocol import CellResult, CellTask
from benchkit.worker import describe_error, execute_task

IN_FLIGHT_PER_THREAD = 2
"""Tasks submitted per worker thread ahead of their results (see :meth:`DaskSession.run`)."""


class DaskSession:
    """Cells on Dask distributed: the cluster at ``scheduler``, or a LocalCluster on loopback.

    A scheduler address is connected to at once, so that a wrong address fails before anything
    is written; a local cluster starts only when there is something to run.
    """

    def __init__(
        self, workers: int, scheduler: str | None, mode: str = numerics.DEFAULT_MODE
    ) -> None:
        from distributed import Client

        self.workers, self.cluster, self.client = workers, None, None
        self._set_up = False
        self.mode = mode
        if scheduler:
            try:
                self.client = Client(scheduler, timeout="10s")
            except (OSError, TimeoutError, ValueError) as exc:  # ValueError: malformed address
                raise SpecError(
                    f"--scheduler {scheduler}: cannot connect: {exc}"
                ) from None

    def _connect(self) -> Any:
        if self.client is None:
            import logging

            import dask
            from distributed import Client, LocalCluster

            from benchkit import daskworker

            config = {**daskworker.nanny_config(self.mode), **daskworker.SCHEDULER_CONFIG}
            saved = {k: os.environ.get(k) for k in numerics.worker_environ(self.mode)}
            try:  # Dask sets the pre-spawn environment in this (the nanny's) process too
                with dask.config.set(config):
                    self.cluster = LocalCluster(
                        n_workers=max(1, self.workers),
                        threads_per_worker=1,
                        processes=True,
                        host="127.0.0.1",
                        dashboard_address=None,
                        silence_logs=logging.ERROR,
                    )
            finally:
                for k, v in saved.items():
                    if v is None:
                        os.environ.pop(k, None)
                    else:
                        os.environ[k] = v
            self.client = Client(self.cluster)
        if not self._set_up:
            self._set_up_workers(self.client)
        return self.client

    def _set_up_workers(self, client: Any) -> None:
        """Register the worker set-up plug-in; warn about workers that loaded torch before it."""
        from benchkit import daskworker

        client.register_plugin(daskworker.WorkerSetup())
        self._set_up = True
        states = client.run(daskworker.configure_process)
        early = sorted(addr for addr, state in states.items() if state["torch_loaded_before"])
        if early:
            print(
                f"benchkit: warning: Dask worker(s) {', '.join(early)} imported torch before "
                "benchkit set them up: their thread and numeric settings may differ from a "
                "local-pool worker's; start workers with `benchkit worker`",
                file=sys.stderr,
            )

    def run(self, tasks: Iterable[CellTask]) -> Iterator[CellResult]:
        """Submit the tasks, a few per worker thread at a time; yield results as they end.

        Like the local pool, each task carries its own entity and nothing else stays on the
        cluster: a worker that dies takes only the cells it held with it (no shared data or
        finished result of ours is left there to recompute), and the scheduler holds at most
        :data:`IN_FLIGHT_PER_THREAD` tasks per worker thread, whatever the size of the grid.
        """
        import dask
        from distributed import as_completed

        queue = deque(tasks)
        if not queue:
            return
        client = self._connect()
        limit = IN_FLIGHT_PER_THREAD * max(1, sum(client.nthreads().values()))
        futures: dict[Any, CellTask] = {}
        pending = as_completed(with_results=True, raise_errors=False)

        def submit() -> None:
            while queue and len(futures) < limit:
                task = queue.popleft()
                fut = client.submit(execute_task, task, pure=False, retries=0)
                futures[fut] = task
                pending.add(fut)

        # an entity is a few MB: sending it with its task is the point here
        with dask.config.set({"distributed.admin.large-graph-warning-threshold": "4GB"}):
            submit()
            for fut, value in pending:
                task = futures.pop(fut)
                if isinstance(value, CellResult):
                    result = value
                else:  # (type, exception, traceback): a worker lost mid-cell, for example
                    exc = value[1] if isinstance(value, tuple) else value
                    result = CellResult(task.key, "failed", error=f"dask: {describe_error(exc)}")
                fut.release()
                submit()
                yield result

    def close(self) -> None:
        if self.client is not None:
            self.client.close()
        if self.cluster is not None:
            self.cluster.close()

    def __enter__(self) -> DaskSession:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
