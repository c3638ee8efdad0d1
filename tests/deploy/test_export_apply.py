"""export-model then apply: the bundle is the measured detector (cached scores and alert count
reproduced bit for bit), and bad bundles, data and arguments are refused in one line, exit 2.

Reference for every "same scores" check: the scores the runner cached for the cell
(``Store.load_scores``), i.e. benchkit's own protocol (docs/internals.md); the alert count is
``count(test_scores >= threshold_pot)`` with the run's recorded POT threshold.
"""

from __future__ import annotations

import io
import json
import shutil

import numpy as np
import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.deploy.bundle import MANIFEST, manifest_digest
from benchkit.store import Store

from .conftest import ENTITY


def _cached(run, variant):
    with Store(run) as store:
        cells = store.cells_frame()
        key = cells[(cells["variant"] == variant) & (cells["perturbation"] == "none")]
        return store.load_scores(key["cell_key"].iloc[0])


def _apply(capsys, *args):
    code = main(["apply", *map(str, args)])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


@pytest.mark.parametrize("variant", ["pca-residual", "isolation-forest", "lstm-vae", "random"])
def test_apply_on_the_test_part_reproduces_cached_scores_and_alert_count(
    variant, tiny_run, bundles, test_part, capsys
):
    cached = _cached(tiny_run, variant)
    code, out, err = _apply(capsys, bundles[variant], test_part)
    assert code == 0, err
    table = pd.read_csv(io.StringIO(out))
    # a culprits column where the detector declares attributions (all but isolation-forest here)
    culprits = ["culprits"] if variant != "isolation-forest" else []
    assert list(table.columns) == ["step", "score", "threshold", "alert", *culprits]
    assert table["step"].tolist() == list(range(len(cached["test_scores"])))
    # bit for bit from the first step: the context rows stand in for the train tail
    assert table["score"].to_numpy().tobytes() == cached["test_scores"].tobytes()
    assert (table["threshold"] == cached["threshold_pot"]).all()
    expected_alerts = int(np.count_nonzero(cached["test_scores"] >= cached["threshold_pot"]))
    assert int(table["alert"].sum()) == expected_alerts
    manifest = json.loads((bundles[variant] / MANIFEST).read_text())
    assert manifest["threshold"]["test_alerts"] == expected_alerts


def test_manifest_records_provenance_and_no_file_is_a_pickle(tiny_run, bundles):
    manifest = json.loads((bundles["lstm-vae"] / MANIFEST).read_text())
    with Store(tiny_run) as store:
        run = store.latest_run()
    assert manifest["entity"]["fingerprint"] == run["fingerprints"][f"demo/{ENTITY}"]
    assert manifest["detector"]["params"]["window"] == 6
    assert manifest["detector"]["file"] == "model.pt"
    assert manifest["versions"]["torch"] and manifest["versions"]["benchkit"]
    assert manifest["threshold"]["strategy"] == "pot"
    assert manifest["threshold"]["calibration"]["method"] in ("gpd", "empirical")
    assert set(manifest["files"]) == {"model.pt", "context.npz"}
    assert manifest["digest"] == manifest_digest(manifest)
    for path in bundles["pca-residual"].iterdir():
        if path.suffix == ".npz":
            with np.load(path, allow_pickle=False) as z:  # raises on any object array
                assert all(z[k].dtype != object for k in z.files)


@pytest.mark.parametrize("strategy", ["quantile", "alert-budget"])
def test_other_threshold_bundles_carry_the_runs_threshold(strategy, tiny_run, tmp_path, test_part,
                                                          capsys):  # fmt: skip
    cached = _cached(tiny_run, "pca-residual")
    recorded = cached[f"threshold_{strategy.replace('-', '_')}"]
    target = tmp_path / "q"
    assert main(["export-model", str(tiny_run), "--variant", "pca-residual", "--entity", ENTITY,
                 "--threshold", strategy, "--to", str(target), "--quiet"]) == 0  # fmt: skip
    code, out, _ = _apply(capsys, target, test_part, "--format", "jsonl")
    assert code == 0
    records = [json.loads(line) for line in out.splitlines()]
    assert {r["threshold"] for r in records} == {recorded}
    assert sum(r["alert"] for r in records) == int(np.count_nonzero(cached["test_scores"]
                                                                    >= recorded))  # fmt: skip
    manifest = json.loads((target / MANIFEST).read_text())
    assert manifest["threshold"]["strategy"] == strategy


@pytest.mark.parametrize(
    "variant, tolerance",
    [
        ("isolation-forest", 0.0),  # each feature row scored on its own: identical
        ("pca-residual", 1e-12),  # BLAS products of 1 row vs n rows round differently
        ("lstm-vae", 1e-5),  # float32 batches of 1 vs 1024 windows round differently
    ],
)
def test_follow_on_a_piped_file_gives_the_batch_scores(variant, tolerance, bundles, test_part,
                                                       capsys, monkeypatch):  # fmt: skip
    _, batch, _ = _apply(capsys, bundles[variant], test_part, "--update", "fixed")
    monkeypatch.setattr("sys.stdin", io.StringIO(test_part.read_text()))
    code, follow, err = _apply(capsys, bundles[variant], "-", "--follow", "--update", "fixed")
    assert code == 0, err
    a, b = pd.read_csv(io.StringIO(batch)), pd.read_csv(io.StringIO(follow))
    assert len(a) == len(b) and a["step"].equals(b["step"])
    rel = np.abs(a["score"] - b["score"]) / np.maximum(1.0, np.abs(a["score"]))
    assert rel.max() <= tolerance
    assert np.isfinite(b["score"]).all()


@pytest.mark.parametrize("update", [["--update", "spot"], ["--update", "dspot", "--depth", "10"]])
def test_follow_updates_the_threshold_like_the_batch_path(update, bundles, test_part, capsys,
                                                          monkeypatch):  # fmt: skip
    _, batch, _ = _apply(capsys, bundles["isolation-forest"], test_part, *update)
    monkeypatch.setattr("sys.stdin", io.StringIO(test_part.read_text()))
    extra = [] if update[1] == "spot" else update  # SPOT is the default with --follow
    _, follow, _ = _apply(capsys, bundles["isolation-forest"], "-", "--follow", *extra)
    assert batch == follow
    thresholds = pd.read_csv(io.StringIO(batch))["threshold"]
    assert thresholds.nunique() > 1  # the threshold moved with the stream


@pytest.mark.parametrize(
    "args, message",
    [
        (["--update", "dspot"], "--update dspot: give the moving-average depth"),
        (["--depth", "5"], "--depth: only used with --update dspot"),
        (["--culprits", "-1"], "--culprits: expected an integer >= 0"),
    ],
)
def test_apply_bad_arguments(args, message, bundles, test_part, capsys):
    code, out, err = _apply(capsys, bundles["pca-residual"], test_part, *args)
    assert code == 2 and out == "" and message in err and err.count("\n") == 1


def test_apply_bad_bundle_and_data_paths(bundles, tmp_path, test_part, capsys):
    code, _, err = _apply(capsys, tmp_path / "none", test_part)
    assert code == 2 and "no such bundle folder" in err
    code, _, err = _apply(capsys, tmp_path, test_part)
    assert code == 2 and "not a bundle (no manifest.json)" in err
    code, _, err = _apply(capsys, bundles["pca-residual"], tmp_path / "missing.txt")
    assert code == 2 and "missing.txt: no such file" in err
    code, _, err = _apply(capsys, bundles["pca-residual"], tmp_path / "t.parquet", "--follow")
    assert code == 2 and "--follow: reads text rows" in err


def test_follow_refuses_a_detector_whose_score_depends_on_position(bundles, test_part, capsys):
    code, out, err = _apply(capsys, bundles["random"], test_part, "--follow")
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and "cannot reproduce the batch scores" in err


def test_malformed_rows_are_reported_by_line_and_stop_or_are_skipped(bundles, tmp_path, capsys):
    lines = ["1,2,3,4", "1,2,3", "5,6,oops,8", "1,2,nan,4", "9,8,7,6"]
    data = tmp_path / "bad.txt"
    data.write_text("\n".join(lines) + "\n")
    code, out, err = _apply(capsys, bundles["pca-residual"], data)
    assert code == 2 and out == ""
    assert err.strip() == (f"benchkit: error: {data} line 2: expected 4 comma-separated values, "
                           "got 3 (use --on-bad-row skip to skip such rows)")  # fmt: skip
    code, out, err = _apply(capsys, bundles["pca-residual"], data, "--on-bad-row", "skip")
    assert code == 0
    assert [f"line {n}" in err for n in (2, 3, 4)] == [True, True, True]
    table = pd.read_csv(io.StringIO(out))
    assert len(table) == 2 and np.isfinite(table["score"]).all()


def test_header_rows_are_matched_by_kpi_name(bundles, test_part, tmp_path, capsys):
    manifest = json.loads((bundles["pca-residual"] / MANIFEST).read_text())
    channels = manifest["entity"]["channels"]
    raw = np.loadtxt(test_part, delimiter=",")
    frame = pd.DataFrame(raw[:, ::-1], columns=channels[::-1]).assign(label=0)
    frame.to_csv(tmp_path / "t.csv", index=False, float_format="%.17g")
    frame.to_parquet(tmp_path / "t.parquet")
    _, plain, _ = _apply(capsys, bundles["pca-residual"], test_part)
    for name in ("t.csv", "t.parquet"):
        code, out, err = _apply(capsys, bundles["pca-residual"], tmp_path / name)
        assert code == 0, err
        assert out == plain


def test_kpi_count_mismatch_is_refused(bundles, tmp_path, capsys):
    data = tmp_path / "three.txt"
    data.write_text("1,2,3\n4,5,6\n")
    code, out, err = _apply(capsys, bundles["pca-residual"], data)
    assert code == 2 and out == ""
    assert "3 values per row, but the bundle expects 4 KPIs" in err


def _copy(bundle, tmp_path):
    return shutil.copytree(bundle, tmp_path / "copy")


def test_tampered_bundles_are_refused(bundles, test_part, tmp_path, capsys):
    bundle = _copy(bundles["lstm-vae"], tmp_path)
    manifest_path = bundle / MANIFEST
    original = manifest_path.read_text()
    edited = json.loads(original)
    edited["threshold"]["value"] = 0.0
    manifest_path.write_text(json.dumps(edited))
    code, _, err = _apply(capsys, bundle, test_part)
    assert code == 2 and "manifest digest does not match" in err
    # another torch version: resealed, so only the version check can refuse it
    edited = json.loads(original)
    edited["versions"]["torch"] = "0.0.1"
    edited["digest"] = manifest_digest(edited)
    manifest_path.write_text(json.dumps(edited))
    code, _, err = _apply(capsys, bundle, test_part)
    assert code == 2 and "saved with torch 0.0.1" in err and err.count("\n") == 1
    manifest_path.write_text(original)
    with open(bundle / "model.pt", "ab") as fh:
        fh.write(b"\0")
    code, _, err = _apply(capsys, bundle, test_part)
    assert code == 2 and "model.pt: sha256 does not match" in err


def test_export_refuses_a_plugin_without_save_and_load(tiny_run, tmp_path, capsys):
    target = tmp_path / "echo"
    code = main(["export-model", str(tiny_run), "--variant", "echo", "--entity", ENTITY,
                 "--to", str(target)])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2 and not target.exists()
    assert "has no save(path)/load(path), so export-model cannot bundle it" in err


@pytest.mark.parametrize(
    "args, message",
    [
        (["--variant", "nope"], "--variant 'nope': not in the latest run"),
        (["--entity", "nope"], "--entity 'nope': no clean cell of 'pca-residual'"),
        (["--seed", "7"], "--seed 7: no cell"),
        (["--threshold", "oracle"], "invalid choice"),
        (["--threshold", "alert-budget-oracle"], "invalid choice"),
    ],
)
def test_export_bad_arguments(args, message, tiny_run, tmp_path, capsys):
    base = {"--variant": "pca-residual", "--entity": ENTITY, "--to": str(tmp_path / "b")}
    argv = ["export-model", str(tiny_run)]
    given = dict(zip(args[::2], args[1::2], strict=True))
    for key, value in {**base, **given}.items():
        argv += [key, value]
    with pytest.raises(SystemExit) if "invalid choice" in message else _nothing():
        code = main(argv)
        assert code == 2
    assert message in capsys.readouterr().err
    assert not (tmp_path / "b").exists()


class _nothing:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def test_export_refuses_when_the_refit_does_not_reproduce_the_cache(tiny_run, tmp_path, capsys):
    run = shutil.copytree(tiny_run, tmp_path / "run")
    with Store(run) as store:
        cells = store.cells_frame()
        key = cells.loc[cells["variant"] == "pca-residual", "cell_key"].iloc[0]
        path = store.score_path(key)
    with np.load(path) as z:
        arrays = {k: z[k] for k in z.files}
    arrays["test_scores"][5] = np.nextafter(arrays["test_scores"][5], np.inf)  # one ulp
    np.savez(path, **arrays)
    target = tmp_path / "b"
    code = main(["export-model", str(run), "--variant", "pca-residual", "--entity", ENTITY,
                 "--to", str(target)])  # fmt: skip
    err = capsys.readouterr().err
    assert code == 2 and not target.exists()
    assert "test_scores differ from the cached ones (first at step 5" in err
    assert not list(tmp_path.glob(".b.partial-*"))


@pytest.mark.parametrize("follow", [False, True])
def test_a_non_finite_score_is_never_written(follow, bundles, tmp_path, capsys):
    # a finite row far outside the training range: PCA's squared residual overflows to inf
    data = tmp_path / "huge.txt"
    data.write_text("1,2,3,4\n1e200,1e200,-1e200,1e200\n")
    code, out, err = _apply(capsys, bundles["pca-residual"], data,
                            *(["--follow"] if follow else []))  # fmt: skip
    assert code == 2 and "non-finite score at step 1" in err
    assert "inf" not in out and "nan" not in out
    if not follow:
        assert out == ""  # scored before anything is written


def test_follow_answers_each_row_as_it_arrives(bundles, test_part):
    # a real pipe: write one row, read its output line before writing the next
    import subprocess
    import sys
    import threading

    rows = test_part.read_text().splitlines()[:3]
    proc = subprocess.Popen(
        [sys.executable, "-m", "benchkit.cli", "apply", str(bundles["pca-residual"]), "-",
         "--follow"],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )  # fmt: skip
    watchdog = threading.Timer(60.0, proc.kill)  # a stuck pipe fails the test, never hangs it
    watchdog.start()
    try:
        assert proc.stdout.readline().startswith("step,score,threshold,alert")
        for i, row in enumerate(rows):
            proc.stdin.write(row + "\n")
            proc.stdin.flush()
            assert proc.stdout.readline().startswith(f"{i},")
        proc.stdin.close()
        assert proc.wait(timeout=60) == 0
    finally:
        watchdog.cancel()
        proc.kill()
