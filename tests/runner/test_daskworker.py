"""Dask worker set-up: the allocator, thread and command-line behaviour of benchkit's workers."""

import json
import os
import subprocess
import sys

import pytest

from benchkit.cli import main

# Allocates and frees a 1 MiB block 200 times, counting minor page faults, before and after
# benchkit's worker set-up. mallopt(3): setting M_TRIM_THRESHOLD (which MALLOC_TRIM_THRESHOLD_
# does at start-up) turns off the dynamic mmap threshold, so each block of 128 KiB or more is a
# fresh mmap whose 256 pages fault in again; with the dynamic rule (a local-pool worker) the
# freed block is reused from the heap after the first round.
PROBE = """
import json, os, resource, sys
import numpy as np

def faults():
    start = resource.getrusage(resource.RUSAGE_SELF).ru_minflt
    for _ in range(200):
        block = np.ones(2**17)  # 1 MiB
        del block
    return resource.getrusage(resource.RUSAGE_SELF).ru_minflt - start

before = faults()
from benchkit.daskworker import configure_process
state = configure_process()
after = faults()
threads = {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "MKL_NUM_THREADS")}
print(json.dumps({"before": before, "after": after, "state": state, "threads": threads,
                  "malloc_env": os.environ.get("MALLOC_TRIM_THRESHOLD_")}))
"""


def _probe(env_extra: dict[str, str]) -> dict:
    env = {k: v for k, v in os.environ.items() if k != "MALLOC_TRIM_THRESHOLD_"}
    env.update(env_extra)
    out = subprocess.run(
        [sys.executable, "-c", PROBE], env=env, capture_output=True, text=True, timeout=120
    )
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout.splitlines()[-1])


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc allocator")
def test_a_worker_started_with_dask_trim_threshold_gets_the_heap_reuse_back():
    dask_like = _probe({"MALLOC_TRIM_THRESHOLD_": "65536"})  # Dask's nanny default
    # mallopt(3) as above: 200 rounds of 256 pages fault in while the variable rules
    assert dask_like["before"] >= 200 * 200
    assert dask_like["state"]["malloc_restored"] is True
    assert dask_like["after"] < dask_like["before"] / 20
    assert dask_like["malloc_env"] is None  # not passed on to processes it starts
    assert dask_like["threads"] == {"OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1"}
    assert dask_like["state"]["torch_loaded_before"] is False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc allocator")
def test_a_process_without_the_variable_is_left_to_glibc_defaults():
    plain = _probe({})
    assert plain["state"]["malloc_restored"] is False
    # the dynamic threshold: after the first free the block comes from the heap again
    assert plain["before"] < 200 * 200 / 20 and plain["after"] < 200 * 200 / 20


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["worker", "nonsense"], "worker: SCHEDULER 'nonsense': expected an address like"),
        (["worker", "tcp://127.0.0.1:8786", "--nworkers", "0"], "--nworkers: expected an integer"),
    ],
)
def test_bad_worker_arguments_are_one_line(capsys, argv, message):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"benchkit: error: {message}") and err.count("\n") == 1
