"""``benchkit worker SCHEDULER``: start Dask worker processes set up for benchkit cells.

Each worker process runs one cell at a time (one thread) and starts with the thread limits,
numerics and allocator settings of a local-pool worker (:mod:`benchkit.daskworker`): its nanny
does not give it Dask's fixed malloc trim threshold, and the worker preloads
``benchkit.daskworker``. The command runs until interrupted (Ctrl-C or SIGTERM), or until the
scheduler has been unreachable for ``--death-timeout`` seconds.
"""

from __future__ import annotations

import argparse
import re

from benchkit.errors import BenchkitInputError

# [tcp|tls|ws|wss://]HOST:PORT, HOST a name, an IPv4 address or a bracketed IPv6 address
_ADDRESS = re.compile(r"^(?:(?:tcp|tls|ws|wss)://)?(?:\[[0-9A-Fa-f:.]+\]|[\w.-]+):\d{1,5}$")


def add_parser(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "worker",
        help="start Dask worker processes configured like local-pool workers",
        description="Start Dask worker processes for benchkit cells and connect them to the "
        "scheduler at SCHEDULER (e.g. tcp://10.0.0.5:8786). Each process runs one cell at a "
        "time with the same thread limits, numerics and allocator settings as a local-pool "
        "worker. Runs until interrupted.",
    )
    p.add_argument("scheduler", metavar="SCHEDULER", help="scheduler address, tcp://HOST:PORT")
    p.add_argument(
        "--nworkers", metavar="N", help="worker processes (default: available cores)"
    )
    p.add_argument(
        "--host", metavar="HOST", help="address the workers listen on (default: chosen by Dask)"
    )
    p.add_argument(
        "--memory-limit",
        metavar="BYTES",
        default="auto",
        help="memory per worker process, e.g. 4GiB (default: auto, an equal share)",
    )
    p.add_argument(
        "--death-timeout",
        metavar="S",
        type=float,
        default=None,
        help="stop after the scheduler has been unreachable this long (default: never)",
    )
    p.set_defaults(func=main)


def dask_worker_arguments(args: argparse.Namespace) -> list[str]:
    """The ``dask worker`` command line that :func:`main` runs, after checking the options."""
    from benchkit.runner import available_cores

    if not _ADDRESS.match(args.scheduler):
        raise BenchkitInputError(
            f"worker: SCHEDULER {args.scheduler!r}: expected an address like tcp://HOST:PORT"
        )
    n = available_cores()
    if args.nworkers is not None:
        n = int(args.nworkers) if args.nworkers.isdigit() else 0
        if n < 1:
            raise BenchkitInputError(f"--nworkers: expected an integer >= 1, got {args.nworkers!r}")
    argv = [args.scheduler, "--nworkers", str(n), "--nthreads", "1"]
    argv += ["--preload", "benchkit.daskworker", "--no-dashboard"]
    argv += ["--memory-limit", str(args.memory_limit)]
    if args.host:
        argv += ["--host", args.host]
    if args.death_timeout is not None:
        argv += ["--death-timeout", f"{args.death_timeout:g}"]
    return argv


def main(args: argparse.Namespace) -> int:
    argv = dask_worker_arguments(args)
    import dask
    from distributed.cli.dask_worker import main as dask_worker

    from benchkit.daskworker import nanny_config

    with dask.config.set(nanny_config()):
        try:
            dask_worker.main(args=argv, prog_name="benchkit worker", standalone_mode=False)
        except SystemExit as exc:  # dask's command ends with sys.exit on errors
            return int(exc.code or 0)
    return 0
