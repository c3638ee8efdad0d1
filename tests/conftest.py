"""The test process runs on the pinned numeric path, as the runner's workers do.

Several tests compare what a worker computed (cached scores) with what the test process
computes itself (a bundle applied in-process, a detector scored directly), bit for bit. The
libraries choose their kernels when they load, so the pytest process is started again with the
pinned path's environment (``benchkit.numerics``) before any test module loads; the marker
variable keeps it from doing so twice. Tests that need other paths start subprocesses with
environments of their own.
"""

from __future__ import annotations

import os

from benchkit import numerics


def pytest_configure(config) -> None:
    if os.environ.get(numerics.PROCESS_MARK) == "pinned":
        numerics.enter_worker("pinned")
        return
    capture = config.pluginmanager.getplugin("capturemanager")
    if capture is not None:
        capture.stop_global_capturing()  # give the new process the real stdout and stderr
    numerics.restart_on_path("pinned", ["-m", "pytest", *config.invocation_params.args])
