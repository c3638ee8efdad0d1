"""One writing command per results folder (the flock-based writer lock)."""

import subprocess
import sys
import textwrap

import pytest

from benchkit.cli import main
from benchkit.errors import BenchkitInputError
from benchkit.store import writer_lock


def test_a_second_writer_is_refused_while_the_first_holds_the_lock(tmp_path):
    # common practice (no outside source): advisory flock, as POSIX defines it, excludes a second
    # exclusive holder on another open file description
    with writer_lock(tmp_path):
        with pytest.raises(BenchkitInputError, match="another benchkit command is writing"):
            with writer_lock(tmp_path):
                pass
    with writer_lock(tmp_path):  # released on exit: the next writer gets it
        pass


def test_run_exits_2_with_one_line_while_another_process_holds_the_folder(tmp_path, capsys):
    spec = tmp_path / "tiny.toml"
    spec.write_text(
        'name = "t"\n[[datasets]]\nsource = "demo"\n'
        "[datasets.options]\nn_entities = 1\nn_train = 800\nn_test = 1000\n"
        '[[detectors]]\nname = "random"\n'
    )
    out = tmp_path / "out"
    holder = subprocess.Popen(
        [sys.executable, "-c", textwrap.dedent(f"""
            import sys, time
            from benchkit.store import writer_lock
            with writer_lock({str(out)!r}):
                print("held", flush=True)
                time.sleep(60)
        """)],
        stdout=subprocess.PIPE, text=True,
    )  # fmt: skip
    try:
        assert holder.stdout.readline().strip() == "held"
        assert main(["run", str(spec), "--out", str(out), "--quiet"]) == 2
        err = capsys.readouterr().err.splitlines()
        assert len(err) == 1 and "another benchkit command is writing" in err[0]
        assert not (out / "results.sqlite").exists()
    finally:
        holder.kill()  # SIGKILL: the kernel drops the lock with the process
        holder.wait()
    assert main(["run", str(spec), "--out", str(out), "--quiet"]) == 0
