"""The Dask executor: cells on a Dask distributed cluster, or on a LocalCluster on loopback.

Dask has no hard stop for a cell stuck in one C call: such a cell is marked ``timeout`` only
when that call returns.
"""

from __future__ import annotations

from collections.abc import Iterable, Iterator
from typing import Any

from benchkit.errors import SpecError
from benchkit.protocol import CellResult, CellTask
from benchkit.worker import describe_error, execute_task


class DaskSession:
    """Cells on Dask distributed: the cluster at ``scheduler``, or a LocalCluster on loopback.

    A scheduler address is connected to at once, so that a wrong address fails before anything
    is written; a local cluster starts only when there is something to run.
    """

    def __init__(self, workers: int, scheduler: str | None) -> None:
        from distributed import Client

        self.workers, self.cluster, self.client = workers, None, None
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

            from distributed import Client, LocalCluster

            self.cluster = LocalCluster(
                n_workers=max(1, self.workers),
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address=None,
                silence_logs=logging.ERROR,
            )
            self.client = Client(self.cluster)
        return self.client

    def run(self, tasks: Iterable[CellTask]) -> Iterator[CellResult]:
        """Submit every task (each entity sent to the cluster once); yield results as they end."""
        from distributed import as_completed

        tasks = list(tasks)
        if not tasks:
            return
        client = self._connect()
        scattered: dict[int, Any] = {}
        futures = {}
        for task in tasks:
            entity = task.entity
            if id(entity) not in scattered:
                scattered[id(entity)] = client.scatter(entity, hash=False)
            bare = CellTask(**{**task.__dict__, "entity": None})
            fut = client.submit(execute_task, bare, scattered[id(entity)], pure=False, retries=0)
            futures[fut] = task
        for fut in as_completed(list(futures)):
            task = futures[fut]
            try:
                result = fut.result()
            except Exception as exc:  # a worker lost mid-cell, for example
                result = CellResult(task.key, "failed", error=f"dask: {describe_error(exc)}")
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
