"""Diagnosis on the public data: HitRate@P% per detector, attribution time, and its cache cost.

Runs built-in detectors on the public server-machine data (Su et al., KDD 2019) and
application-server data (Li et al., KDD 2021) under ``../shared/data/public`` (or
``$BENCHKIT_PUBLIC_DATA``), then prints, side by side in one run:

1. per detector and threshold strategy: HitRate@100%, HitRate@150%, NDCG@150% (mean over
   entities), events diagnosed, and the HitRate@150% margin over the ``random`` detector's
   attributions and over a random ranking of the same events (chance);
2. attribution seconds beside scoring seconds per detector (mean per cell) and their ratio;
3. the score cache: bytes of all score files, and the bytes the attributions add (each file
   written again without them, compressed the same way).

Timings are noisy when other work shares the machine; read the ratios.

Run: ``.venv/bin/python benchmarks/diagnosis_public.py [--deep] [--entities N]``.
"""

from __future__ import annotations

import argparse
import io
import os
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.runner import run_experiment
from benchkit.spec import parse_spec
from benchkit.store import Store

ROOT = Path(__file__).resolve().parents[1]
CLASSICAL = ["random", "step-change", "pca-residual", "correlation-break", "shape-clusters",
             "pyod:ECOD", "pyod:COPOD", "isolation-forest"]  # fmt: skip
DEEP = ["lstm-vae", "factorized-vae"]
SHOWN = ("hit_rate@100", "hit_rate@150", "ndcg@150")


def public_root() -> Path:
    return Path(os.environ.get("BENCHKIT_PUBLIC_DATA", ROOT.parent / "shared" / "data" / "public"))


def spec(entities: int, deep: bool, workers: int) -> dict:
    def dataset(toml: str, prefix: str, count: int) -> dict:
        names = sorted(p.stem for p in (public_root() / prefix / "test").glob("*.txt"))
        return {"source": str(ROOT / "datasets" / toml), "entities": names[:count]}

    return {
        "name": "diagnosis-public",
        "seeds": [0],
        "scaling": "minmax",
        "execution": {"workers": workers, "cell_time_limit": 3600.0},
        "thresholds": {"strategies": ["oracle", "pot", "quantile"], "pot_risk": 0.001,
                       "pot_initial_quantile": 0.98, "quantile_level": 0.99},
        "datasets": [dataset("server-machines.toml", "server-machines", entities),
                     dataset("app-servers.toml", "app-servers", 2 * entities)],
        "detectors": [{"name": n} for n in CLASSICAL + (DEEP if deep else [])],
    }  # fmt: skip


def diagnosis_summary(metrics: pd.DataFrame) -> pd.DataFrame:
    clean = metrics[metrics["perturbation"] == "none"]
    wide = clean.pivot_table(index=["threshold", "variant", "dataset", "entity"],
                             columns="metric", values="value")  # fmt: skip
    rows = []
    for (threshold, variant), block in wide.groupby(level=["threshold", "variant"]):
        if threshold == "none" or "hit_rate@150" not in block or block["hit_rate@150"].isna().all():
            continue
        rec = {"threshold": threshold, "variant": variant}
        rec.update({m: block[m].mean() for m in SHOWN})
        rec["over_chance"] = (block["hit_rate@150"] - block["chance_hit_rate@150"]).mean()
        rec["diagnosed"] = block["diagnosed_events"].sum()
        rows.append(rec)
    out = pd.DataFrame(rows)
    reference = out[out["variant"] == "random"].set_index("threshold")["hit_rate@150"]
    out["over_random"] = out["hit_rate@150"] - out["threshold"].map(reference)
    culprit_events = clean[clean["metric"] == "culprit_events"]
    out.attrs["culprit_events"] = culprit_events.groupby("variant")["value"].sum().max()
    return out


def cache_bytes(store: Store, keys: list[str]) -> tuple[int, int]:
    """(bytes of the score files, bytes they would have without attributions)."""
    total = without = 0
    for key in keys:
        path = store.score_path(key)
        total += path.stat().st_size
        with np.load(path) as z:
            kept = {k: z[k] for k in z.files if k not in ("attributions", "attribution_steps")}
        buffer = io.BytesIO()
        np.savez_compressed(buffer, **kept)
        without += buffer.getbuffer().nbytes
    return total, without


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--entities", type=int, default=5,
                        help="server machines (twice as many app servers) to run")
    parser.add_argument("--deep", action="store_true", help="add lstm-vae and factorized-vae")
    parser.add_argument("--workers", type=int, default=2)
    parser.add_argument("--out", help="results folder (default: a temporary one)")
    args = parser.parse_args()
    if not (public_root() / "server-machines").is_dir():
        raise SystemExit(f"no public data under {public_root()} (set BENCHKIT_PUBLIC_DATA)")
    with tempfile.TemporaryDirectory() as tmp:
        out = Path(args.out) if args.out else Path(tmp) / "out"
        start = time.perf_counter()
        summary = run_experiment(parse_spec(spec(args.entities, args.deep, args.workers)), out,
                                 quiet=True, data_root=public_root())  # fmt: skip
        print(f"{summary.n_cells} cells in {time.perf_counter() - start:.0f} s "
              f"({summary.n_failed} failed, {summary.n_timeout} timed out)\n")
        with Store(out) as store:
            metrics, cells = store.metrics_frame(), store.cells_frame()
            ok = cells[cells["status"] == "ok"]
            total, without = cache_bytes(store, list(ok["cell_key"]))
    table = diagnosis_summary(metrics)
    pd.set_option("display.width", 160)
    print(f"Diagnosis, mean over entities ({table.attrs['culprit_events']:.0f} events with "
          "culprit labels in all):")
    print(table.round(3).to_string(index=False))
    timing = ok.groupby("variant")[["score_seconds", "attribute_seconds"]].mean()
    timing["attribute/score"] = timing["attribute_seconds"] / timing["score_seconds"]
    print("\nSeconds per cell (mean over entities):")
    print(timing.round(3).to_string())
    print(f"\nScore cache: {total / 1e6:.2f} MB in {len(ok)} files; without attributions "
          f"{without / 1e6:.2f} MB; attributions add {(total - without) / 1e6:.2f} MB "
          f"(x{total / without:.2f})")


if __name__ == "__main__":
    main()
