"""The numeric path of a worker process: which kernels compute a cell's numbers.

The same seed gives the same bits only when the same machine code runs. On x86-64 that code is
chosen at run time from the processor (torch's ATen kernel level, MKL's code branch, oneDNN's
instruction set, OpenBLAS's core type, numpy's SIMD dispatch), so two ordinary servers of
different vendors or generations train a neural detector along different rounding paths, and
training amplifies the last bit into visible metric differences.

``numerics = "pinned"`` (the default) puts every worker on one documented path:

=========================  ==================================  =================================
library                    setting                             path on any x86-64-v3 processor
=========================  ==================================  =================================
torch (ATen CPU kernels)   ``ATEN_CPU_CAPABILITY=avx2``        its AVX2 kernels, never AVX-512
MKL (torch's BLAS)         ``MKL_CBWR=COMPATIBLE``             MKL's vendor-neutral SSE2 branch
oneDNN (torch)             off in the worker, ISA capped       not used
OpenBLAS (numpy, scipy)    ``OPENBLAS_CORETYPE=Haswell``       the same kernels on Intel and AMD
numpy SIMD dispatch        ``NPY_DISABLE_CPU_FEATURES``        at most X86_V3 (AVX2), no AVX-512
threads                    one per worker                      no reduction-order changes
=========================  ==================================  =================================

The three SIMD-level switches share one level, x86-64-v3 (AVX2 and FMA, every x86 server
processor of the last decade): the same compiled code runs on Intel and AMD alike. MKL is the
exception: Intel's oneMKL developer guide ("Specifying Code Branches", "Getting Started with
Conditional Numerical Reproducibility") names ``COMPATIBLE`` as its branch for any processor and
says a named branch such as ``AVX2`` falls back to ``AUTO`` on non-Intel processors, so only
``COMPATIBLE`` gives the same MKL results across vendors. A processor below x86-64-v3 cannot run
the pinned path (its workers refuse their cells); use ``"fast"`` there.

These are read when each library loads, so they are set in the worker's environment before the
worker process starts (:func:`worker_environ`); :func:`enter_worker` then switches oneDNN off,
checks that every library took the path, and refuses to compute a cell on a worker that did not
(a Dask worker started without ``benchkit worker``, for example). ``numerics = "fast"`` keeps
each library's own choice: faster, but exact agreement across machines is not expected.

The driver process is never changed: a detector run in-process (a notebook, ``check-detector``)
keeps the caller's settings.
"""

from __future__ import annotations

import os
import platform
import sys
from typing import Any

MODES = ("pinned", "fast")
DEFAULT_MODE = "pinned"

THREAD_ENVIRON = {"OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1"}
"""One thread per worker in both modes: the pool, not the libraries, uses the cores."""

# numpy >= 2.4 groups its x86 dispatch targets; the three above X86_V3 are switched off.
NUMPY_DISABLED = ("X86_V4", "AVX512_ICL", "AVX512_SPR")

PINNED_ENVIRON = {
    "ATEN_CPU_CAPABILITY": "avx2",
    "MKL_CBWR": "COMPATIBLE",
    "ONEDNN_MAX_CPU_ISA": "SSE41",
    "DNNL_MAX_CPU_ISA": "SSE41",
    "OPENBLAS_CORETYPE": "Haswell",
    "NPY_DISABLE_CPU_FEATURES": ",".join(NUMPY_DISABLED),  # no spaces: safe in `env $(...)`
}

PINNED_PATH = {
    "torch_kernels": "AVX2",
    "mkl_cbwr": "COMPATIBLE",
    "onednn": "off",
    "openblas": "Haswell",
    "numpy_simd": "X86_V3",
}
"""What a pinned worker reports from :func:`observe` (the path recorded in scorecards)."""

# Fields of the numeric environment that must be equal for exact agreement to be expected.
EXACT_FIELDS = ("mode", "machine", "path", "torch", "numpy", "scipy", "scikit-learn", "pyod",
                "openblas", "mkl")


PROCESS_MARK = "BENCHKIT_PROCESS_NUMERICS"
"""Set in a process started on a numeric path by :func:`restart_on_path` (its value: the mode)."""


class NumericsMismatch(RuntimeError):
    """A worker whose libraries did not take the path its cells ask for."""


def check_mode(mode: str) -> str:
    """``mode`` if it is one of :data:`MODES`, else a ValueError naming the choices."""
    if mode not in MODES:
        raise ValueError(f"numerics must be one of {', '.join(MODES)}, got {mode!r}")
    return mode


def worker_environ(mode: str = DEFAULT_MODE) -> dict[str, str]:
    """Environment variables a worker process needs from its start for ``mode``.

    Parameters
    ----------
    mode : ``"pinned"`` or ``"fast"``.

    Returns
    -------
    dict of variable -> value: the thread limits, plus the pinned path's settings for
    ``"pinned"`` on x86-64 (other architectures have no such switches: only threads).
    """
    env = dict(THREAD_ENVIRON)
    if check_mode(mode) == "pinned" and _is_x86_64():
        env.update(PINNED_ENVIRON)
    return env


def pin_process(mode: str = DEFAULT_MODE) -> dict[str, str]:
    """Set :func:`worker_environ` in this process's environment and return it.

    Only for a worker process that has not loaded numpy or torch yet (a Dask worker's start-up
    hook): libraries read these variables when they load. :func:`enter_worker` later checks
    that they took effect.
    """
    env = worker_environ(mode)
    os.environ.update(env)
    return env


def enter_worker(mode: str = DEFAULT_MODE) -> dict[str, str]:
    """Finish setting up this worker process for ``mode`` and check the path it is on.

    Call it in a worker (never in a caller's own process: it switches torch's oneDNN off for
    good). Imports torch if the process has not yet.

    Returns
    -------
    The observed path (:func:`observe`).

    Raises
    ------
    NumericsMismatch : ``mode`` is ``"pinned"`` and a library took another path (its
        environment came too late: the process loaded it before :func:`worker_environ` applied).
    """
    import torch

    if torch.get_num_threads() != 1:
        torch.set_num_threads(1)
    if check_mode(mode) == "pinned":
        torch.backends.mkldnn.enabled = False
    seen = observe()
    if mode == "pinned" and _is_x86_64():
        wrong = {k: v for k, v in seen.items() if PINNED_PATH.get(k, v) != v}
        if wrong:
            detail = ", ".join(f"{k} is {v} (pinned: {PINNED_PATH[k]})" for k, v in wrong.items())
            raise NumericsMismatch(
                f"worker not on the pinned numeric path: {detail}; its environment must be set "
                "before it starts (local pool: automatic; Dask: start workers with "
                "`benchkit worker` or its preload)"
            )
    return seen


def restart_on_path(mode: str, argv: list[str]) -> None:
    """Replace this process by ``python argv...`` started on ``mode``'s numeric path.

    For commands that compute in their own process what a worker computed (``apply`` and
    ``export-model`` score a fitted detector): the libraries read the path only when they load,
    so the process is started again with it. Returns only when nothing needs doing: ``"fast"``,
    or this process was already started on the path (then it finishes the worker's set-up with
    :func:`enter_worker`). Never call it in a caller's own process (a notebook, a test run).
    """
    if check_mode(mode) == "fast":
        return
    if os.environ.get(PROCESS_MARK) == mode:
        enter_worker(mode)
        return
    sys.stdout.flush()
    sys.stderr.flush()
    env = {**os.environ, **worker_environ(mode), PROCESS_MARK: mode}
    os.execve(sys.executable, [sys.executable, *argv], env)


def observe() -> dict[str, str]:
    """The numeric path this process is on: torch kernel level, MKL branch setting, oneDNN,
    OpenBLAS core types and numpy's highest SIMD target in use."""
    path: dict[str, str] = {}
    if "torch" in sys.modules:
        torch = sys.modules["torch"]
        path["torch_kernels"] = str(torch.backends.cpu.get_cpu_capability())
        path["onednn"] = "on" if torch.backends.mkldnn.enabled else "off"
    path["mkl_cbwr"] = os.environ.get("MKL_CBWR", "unset")
    cores = sorted({i.get("architecture") or "?" for i in _blas_info()})
    path["openblas"] = ",".join(cores) if cores else "none"
    path["numpy_simd"] = _numpy_simd()
    return path


def describe(mode: str = DEFAULT_MODE) -> dict[str, Any]:
    """The numeric environment a scorecard records for a run in ``mode`` on this machine.

    Returns
    -------
    dict with ``mode``, ``machine`` (architecture), ``cpu`` (vendor and model, for reading only),
    ``path`` (the path workers take: :data:`PINNED_PATH` when pinned on x86-64, else this
    process's own path), the versions that change bits (torch, numpy, scipy, scikit-learn, pyod,
    OpenBLAS, MKL) and ``environ`` (the variables set in workers).
    """
    from importlib.metadata import PackageNotFoundError, version

    record: dict[str, Any] = {"mode": check_mode(mode), "machine": platform.machine()}
    record["cpu"] = _cpu_name()
    if mode == "pinned" and _is_x86_64():
        record["path"] = dict(PINNED_PATH)
    else:
        import torch  # noqa: F401  (observe reads it only when loaded)

        record["path"] = observe()
    for name in ("torch", "numpy", "scipy", "scikit-learn", "pyod"):
        try:
            record[name] = version(name)
        except PackageNotFoundError:
            record[name] = None
    record["openblas"] = ",".join(sorted({str(i.get("version")) for i in _blas_info()})) or None
    record["mkl"] = _mkl_version()
    record["environ"] = worker_environ(mode)
    return record


def exact_agreement_blockers(recorded: dict | None, local: dict) -> list[str]:
    """Why two numeric environments cannot be expected to give identical bits (empty: they can).

    Parameters
    ----------
    recorded : the scorecard's ``environment["numerics"]`` (``None`` for an older scorecard).
    local : :func:`describe` for the same mode on this machine.
    """
    if not recorded:
        return ["the scorecard records no numeric environment (made by an older benchkit)"]
    reasons = []
    if "fast" in (recorded.get("mode"), local.get("mode")):
        reasons.append('numerics = "fast": each machine keeps its own kernels')
    for key in EXACT_FIELDS:
        if key == "mode":
            continue
        if recorded.get(key) != local.get(key):
            mine, theirs = _show(local.get(key)), _show(recorded.get(key))
            reasons.append(f"{key}: scorecard {theirs}, here {mine}")
    return reasons


def _show(value: Any) -> str:
    if isinstance(value, dict):
        return ", ".join(f"{k}={v}" for k, v in sorted(value.items()))
    return str(value)


def _is_x86_64() -> bool:
    return platform.machine().lower() in ("x86_64", "amd64")


def _blas_info() -> list[dict]:
    try:
        from threadpoolctl import threadpool_info
    except ImportError:  # pragma: no cover - threadpoolctl comes with scikit-learn
        return []
    return [i for i in threadpool_info() if i.get("internal_api") == "openblas"]


def _numpy_simd() -> str:
    try:
        from numpy._core._multiarray_umath import __cpu_dispatch__, __cpu_features__
    except ImportError:  # pragma: no cover - numpy < 2
        return "unknown"
    in_use = [t for t in __cpu_dispatch__ if __cpu_features__.get(t)]
    return in_use[-1] if in_use else "baseline"


def _mkl_version() -> str | None:
    try:
        import torch
    except ImportError:  # pragma: no cover - torch is a dependency
        return None
    for line in torch.__config__.show().splitlines():
        if "Math Kernel Library Version" in line:
            return line.split("Version", 1)[1].strip()
    return None


def _cpu_name() -> str:
    try:
        with open("/proc/cpuinfo", encoding="utf-8") as fh:
            for line in fh:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


if __name__ == "__main__":  # `python -m benchkit.numerics [MODE]`: the worker environment
    for name, value in worker_environ(sys.argv[1] if len(sys.argv) > 1 else DEFAULT_MODE).items():
        print(f"{name}={value}")
