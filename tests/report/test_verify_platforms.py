"""``verify`` across platforms: it names what differs in the numeric environment and splits the
differences by the scorecard's own spread over seeds.

The split rule is ours (a value that moved by no more than it moves between seeds of the same
cell can be a rounding path's doing); the spreads are checked against a hand-computed example
and against pandas' own max - min over the tiny run's seeds.
"""

from __future__ import annotations

import json
import math

import pandas as pd
import pytest

from benchkit.cli import main
from benchkit.report.scorecard import compute_digest
from benchkit.report.verify import seed_spreads, verify_scorecard


def _record(seed, value, variant="vae"):
    return {"variant": variant, "dataset": "d", "entity": "e", "seed": seed,
            "perturbation": "none", "status": "ok", "metrics": {"oracle": {"f1": value}}}


def test_seed_spread_is_max_minus_min_over_seeds_of_the_same_cell():
    records = {"a": _record(0, 0.5), "b": _record(1, 0.8), "c": _record(2, 0.6),
               "d": _record(0, 0.3, variant="solo")}  # fmt: skip
    spreads = seed_spreads(records)
    # hand-worked: max 0.8 - min 0.5 = 0.3 for each seed of "vae"; "solo" has one seed: none
    assert spreads == {(k, "oracle", "f1"): pytest.approx(0.3) for k in "abc"}


def _rewrite(path, content):
    content["digest"] = compute_digest(content)
    path.write_text(json.dumps(content), encoding="utf-8")


def _movable(content):
    """(cell key, spread) of two cells of different groups (variant, entity, perturbation)
    whose oracle F1 has a positive seed spread."""
    spreads = seed_spreads(content["cells"])
    cells = content["cells"]
    picks = [(k, s) for (k, t, m), s in spreads.items()
             if (t, m) == ("oracle", "f1") and s > 1e-6 and cells[k]["seed"] == 0]  # fmt: skip
    group = {k: (cells[k]["variant"], cells[k]["entity"], cells[k]["perturbation"])
             for k, _ in picks}  # fmt: skip
    first = picks[0]
    return first, next(p for p in picks if group[p[0]] != group[first[0]])


def test_other_platform_differences_are_split_by_the_seed_spread(tiny_run, tmp_path, capsys):
    content = json.loads((tiny_run / "scorecard.json").read_text("utf-8"))
    # the tiny run's own spreads agree with pandas' max - min over seeds
    rows = [(r["variant"], r["entity"], r["perturbation"], r["metrics"]["oracle"]["f1"])
            for r in content["cells"].values()]  # fmt: skip
    frame = pd.DataFrame(rows, columns=["variant", "entity", "perturbation", "f1"])
    by_cell = frame.groupby(["variant", "entity", "perturbation"])["f1"]
    want = by_cell.max() - by_cell.min()
    got = seed_spreads(content["cells"])
    for key, record in content["cells"].items():
        ident = (record["variant"], record["entity"], record["perturbation"])
        assert got[(key, "oracle", "f1")] == pytest.approx(want[ident], abs=1e-12)

    # The spreads are the scorecard's, changed values included. Seed 0 of one cell moves by half
    # its spread away from seed 1 (spread 1.5 s, explainable); seed 0 of another moves to the far
    # side of seed 1, by 3g + 0.01 where g = v0 - v1, leaving a spread of only 2g + 0.01 (not
    # explainable).
    (small_key, s1), (big_key, _) = _movable(content)
    cells = content["cells"]

    def seed_one(key):
        return next(r for r in cells.values() if r["seed"] == 1 and all(
            r[f] == cells[key][f] for f in ("variant", "entity", "perturbation")))

    def f1(record):
        return record["metrics"]["oracle"]["f1"]

    v0, v1 = f1(cells[small_key]), f1(seed_one(small_key))
    cells[small_key]["metrics"]["oracle"]["f1"] = v0 + math.copysign(s1 / 2, v0 - v1)
    v0, v1 = f1(cells[big_key]), f1(seed_one(big_key))
    gap = v0 - v1
    cells[big_key]["metrics"]["oracle"]["f1"] = v1 - 2 * gap - math.copysign(0.01, gap)
    content["environment"]["numerics"]["machine"] = "aarch64"  # as if made on an Arm server
    path = tmp_path / "scorecard.json"
    _rewrite(path, content)

    result = verify_scorecard(path, workers=2)
    assert any(b.startswith("machine: scorecard aarch64") for b in result.blockers)
    assert not result.reproduced and not result.explained_by_platform
    flags = {(d.cell_key, d.metric): result.platform_explained(d) for d in result.differences}
    assert flags == {(small_key, "f1"): True, (big_key, "f1"): False}

    assert main(["verify", str(path), "--workers", "2"]) == 1
    out = capsys.readouterr().out
    assert "exact agreement is not expected" in out and "machine: scorecard aarch64" in out
    assert "platform: 1 of them lie within the scorecard's spread over seeds" in out


def test_a_scorecard_without_numerics_still_verifies_and_says_what_it_cannot_know(
    tiny_run, tmp_path, capsys
):
    content = json.loads((tiny_run / "scorecard.json").read_text("utf-8"))
    del content["environment"]["numerics"]  # as an older benchkit wrote it
    content["spec"]["execution"].pop("numerics", None)
    path = tmp_path / "old.json"
    _rewrite(path, content)
    assert main(["verify", str(path), "--workers", "2"]) == 0
    out = capsys.readouterr().out
    assert "records no numeric environment (made by an older benchkit)" in out
    assert out.strip().splitlines()[-1].startswith("reproduced: all")
    assert f"of {len(content['cells'])} cells agree" in out
