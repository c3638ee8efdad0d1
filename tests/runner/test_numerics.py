"""The pinned numeric path: it matters, workers take it, the driver is left alone.

Sources: the environment variables are the libraries' documented switches (PyTorch's
``ATEN_CPU_CAPABILITY``; Intel MKL's conditional numerical reproducibility, ``MKL_CBWR``;
OpenBLAS's ``OPENBLAS_CORETYPE``; numpy's ``NPY_DISABLE_CPU_FEATURES``). The reference for
"identical" is the bytes of the scores (sha256), for "the path taken" torch's own
``torch.backends.cpu.get_cpu_capability`` and threadpoolctl's report of OpenBLAS.
"""

from __future__ import annotations

import json
import os
import platform
import subprocess
import sys
from pathlib import Path

import pytest

from benchkit import numerics
from benchkit.cli import main
from benchkit.errors import SpecError
from benchkit.protocol import cell_key
from benchkit.runner import run_experiment
from benchkit.store import Store

from .helpers import tiny_spec, write_spec

HERE = Path(__file__).resolve().parent
ROOT = HERE.parents[1]
X86 = platform.machine().lower() in ("x86_64", "amd64")
PINNED_VARS = ("ATEN_CPU_CAPABILITY", "MKL_CBWR", "OPENBLAS_CORETYPE", "NPY_DISABLE_CPU_FEATURES")


def _probe(mode: str, env: dict[str, str]) -> dict:
    base = {k: v for k, v in os.environ.items() if k not in PINNED_VARS}
    base["PYTHONPATH"] = os.pathsep.join([str(ROOT), base.get("PYTHONPATH", "")])
    done = subprocess.run(
        [sys.executable, str(HERE / "numerics_probe.py"), mode],
        env={**base, **env}, capture_output=True, text=True, timeout=300, check=True,
    )
    return json.loads(done.stdout.strip().splitlines()[-1])


@pytest.mark.skipif(not X86, reason="the kernel switches are x86-64's")
def test_pinning_makes_kernel_levels_agree_and_unpinned_they_do_not():
    # Two ways an ordinary x86 server picks its kernels: torch's ATen level and MKL's branch.
    # "default" and "avx2" are available on every x86-64-v3 machine.
    machine_a = {"ATEN_CPU_CAPABILITY": "default", "MKL_CBWR": "AUTO"}
    machine_b = {"ATEN_CPU_CAPABILITY": "avx2", "MKL_CBWR": "AVX2"}
    a, b = _probe("asis", machine_a), _probe("asis", machine_b)
    assert a["path"]["torch_kernels"] != b["path"]["torch_kernels"]
    assert a["scores"] != b["scores"], "unpinned kernel levels should change the scores"
    pinned = numerics.worker_environ("pinned")
    pa, pb = _probe("pinned", {**machine_a, **pinned}), _probe("pinned", {**machine_b, **pinned})
    assert pa["scores"] == pb["scores"]
    assert pa["path"] == pb["path"] == numerics.PINNED_PATH


@pytest.mark.skipif(not X86, reason="the kernel switches are x86-64's")
def test_a_worker_whose_environment_came_too_late_is_refused():
    code = (
        "import os, torch\n"
        "torch.ones(3).exp()\n"  # torch has chosen its kernels now
        "os.environ.update(" + repr(numerics.worker_environ("pinned")) + ")\n"
        "from benchkit import numerics\n"
        "try:\n"
        "    numerics.enter_worker('pinned')\n"
        "except numerics.NumericsMismatch as exc:\n"
        "    print('refused:', exc)\n"
    )
    env = {k: v for k, v in os.environ.items() if k not in PINNED_VARS}
    env["ATEN_CPU_CAPABILITY"] = "default"
    done = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                          text=True, timeout=120, check=True, cwd=ROOT)  # fmt: skip
    assert done.stdout.startswith("refused: worker not on the pinned numeric path")
    assert "torch_kernels is DEFAULT (pinned: AVX2)" in done.stdout


@pytest.mark.skipif(not X86, reason="the kernel switches are x86-64's")
def test_local_pool_workers_take_the_pinned_path_and_the_driver_keeps_its_own(tmp_path):
    import torch

    record = tmp_path / "path.json"
    before_env = {k: os.environ.get(k) for k in PINNED_VARS}
    before_onednn = torch.backends.mkldnn.enabled
    spec = tiny_spec([{"name": "runner.plugins:PathRecorder", "params": {"record": str(record)}}])
    summary = run_experiment(spec, tmp_path / "out", workers=1, quiet=True)
    assert summary.ok
    assert json.loads(record.read_text()) == numerics.PINNED_PATH
    # no global state leaks into the caller (a notebook, say)
    assert {k: os.environ.get(k) for k in PINNED_VARS} == before_env
    assert torch.backends.mkldnn.enabled == before_onednn
    with Store(tmp_path / "out") as store:
        recorded = store.latest_run()["environment"]["numerics"]
    assert recorded["mode"] == "pinned" and recorded["path"] == numerics.PINNED_PATH


def test_fast_mode_keeps_the_machine_path_and_says_so(tmp_path):
    record = tmp_path / "path.json"
    spec = tiny_spec([{"name": "runner.plugins:PathRecorder", "params": {"record": str(record)}}],
                     execution={"numerics": "fast"})  # fmt: skip
    assert run_experiment(spec, tmp_path / "out", workers=1, quiet=True).ok
    seen = json.loads(record.read_text())
    assert seen["onednn"] == "on"  # oneDNN is switched off only on the pinned path
    assert "ATEN_CPU_CAPABILITY" not in numerics.worker_environ("fast")
    local = numerics.describe("fast")
    assert any("fast" in r for r in numerics.exact_agreement_blockers(local, local))


def test_numerics_is_part_of_the_cell_key_and_validated(tmp_path, capsys):
    args = ("random", {"seed": 0}, "f" * 64, "node", 0, "none", "zscore")
    assert cell_key(*args, numerics="pinned") != cell_key(*args, numerics="fast")
    assert cell_key(*args) == cell_key(*args, numerics="pinned")
    with pytest.raises(SpecError, match=r"execution\.numerics"):
        tiny_spec([{"name": "random"}], execution={"numerics": "exact"})
    spec = write_spec(tmp_path / "bad.toml", [{"name": "random"}],
                      execution={"numerics": "exact"})  # fmt: skip
    assert main(["run", str(spec), "--out", str(tmp_path / "out"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "execution.numerics" in err[0]
    assert not (tmp_path / "out").exists()


def test_exact_agreement_blockers_name_each_difference():
    local = numerics.describe("pinned")
    assert numerics.exact_agreement_blockers(dict(local), local) == []
    other = {**local, "machine": "aarch64", "torch": "2.99.0"}
    reasons = numerics.exact_agreement_blockers(other, local)
    assert any(r.startswith("machine: scorecard aarch64") for r in reasons)
    assert any(r.startswith("torch: scorecard 2.99.0") for r in reasons)
    older = numerics.exact_agreement_blockers(None, local)
    assert older == ["the scorecard records no numeric environment (made by an older benchkit)"]
