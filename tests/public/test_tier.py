"""The public-data tier itself: it skips with one line naming the variable on a clone without the
data, and fails instead under CI (``CI`` set), in pytest and in ``.ci/run`` (common practice, no
source: a CI gate that cannot silently lose a test tier)."""

from __future__ import annotations

import os
import subprocess
import sys

from .conftest import REPO, VARIABLE

ONE_TEST = "tests/public/test_public_data.py::test_events_channels_and_steps_match_the_readme"


def _environment(tmp_path, ci: bool) -> dict:
    env = {k: v for k, v in os.environ.items() if k != "CI"}
    env[VARIABLE] = str(tmp_path / "nowhere")
    if ci:
        env["CI"] = "true"
    return env


def _pytest(tmp_path, ci: bool) -> subprocess.CompletedProcess:
    return subprocess.run(
        [sys.executable, "-m", "pytest", ONE_TEST, "-q", "-rs", "-p", "no:cacheprovider"],
        cwd=REPO,
        env=_environment(tmp_path, ci),
        capture_output=True,
        text=True,
        timeout=300,
    )


def test_missing_data_skips_naming_the_variable(tmp_path):
    done = _pytest(tmp_path, ci=False)
    assert done.returncode == 0, done.stdout
    skipped = [line for line in done.stdout.splitlines() if line.startswith("SKIPPED")]
    assert len(skipped) == 1 and VARIABLE in skipped[0]


def test_missing_data_fails_under_ci(tmp_path):
    done = _pytest(tmp_path, ci=True)
    assert done.returncode == 1 and VARIABLE in done.stdout and "CI is set" in done.stdout


def test_ci_entry_point_stops_before_the_suite_without_the_data(tmp_path):
    done = subprocess.run(
        ["sh", str(REPO / ".ci" / "run")],
        env=_environment(tmp_path, ci=True),
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert done.returncode == 1
    assert done.stdout == "" and VARIABLE in done.stderr and "public data not found" in done.stderr
