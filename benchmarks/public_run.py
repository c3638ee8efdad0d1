"""Run ``datasets/public-experiment.toml`` on the public data and rewrite ``results/public/``.

One command, which replaces the whole folder (nothing of an earlier version is kept):

    .venv/bin/python benchmarks/public_run.py [--data-root ../shared/data/public] [--workers N]
        [--work DIR]

The data root defaults to ``$BENCHKIT_PUBLIC_DATA``, else ``../shared/data/public`` from the
repository root. The experiment runs in a temporary folder (or in ``--work DIR``, kept, which
resumes a run there: finished cells are not recomputed); what is committed is its scorecard,
report tables (plus one comparison table per dataset under ``tables/by-dataset/``), plots and HTML
report, never the data or the score cache. The README section "Results on public data" between
its two marker lines is rewritten from the per-dataset POT tables. Prints the wall time and the
cell count; ``benchkit verify results/public/scorecard.json --data-root ROOT --spec-dir datasets``
re-runs and compares it.
"""

from __future__ import annotations

import argparse
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
SPEC = REPO / "datasets" / "public-experiment.toml"
OUT = REPO / "results" / "public"
README = REPO / "README.md"
KEPT = ("scorecard.json", "report.html", "tables", "plots")
README_START = "<!-- public-results:start (written by benchmarks/public_run.py) -->"
README_END = "<!-- public-results:end -->"
README_STRATEGY = "pot"
DATASET_TITLES = {
    "server-machines": "Server-machine data (Su et al., KDD 2019)",
    "app-servers": "Application-server data (Li et al., KDD 2021)",
}


def default_root() -> Path:
    given = os.environ.get("BENCHKIT_PUBLIC_DATA")
    return Path(given) if given else REPO.parent / "shared" / "data" / "public"


def run(root: Path, workers: int | None, work: Path) -> float:
    """Run the public experiment into ``work`` (report and scorecard included); wall seconds."""
    from benchkit.cli import main

    for name in KEPT:  # a kept --work folder: drop the last report, so nothing stale is copied
        target = work / name
        if target.is_dir():
            shutil.rmtree(target)
        elif target.exists():
            target.unlink()
    args = ["run", str(SPEC), "--out", str(work), "--data-root", str(root), "--quiet"]
    if workers is not None:
        args += ["--workers", str(workers)]
    start = time.perf_counter()
    status = main(args)
    seconds = time.perf_counter() - start
    if status != 0:
        raise SystemExit(f"public_run: benchkit run exited {status}; results/public left as it was")
    return seconds


def per_dataset_tables(work: Path, staging: Path) -> dict[str, dict[str, str]]:
    """Comparison tables of each dataset alone (markdown), written to ``tables/by-dataset/``."""
    from benchkit.report import render_table
    from benchkit.report.tables import comparison_table
    from benchkit.store import Store

    with Store(work) as store:
        metrics = store.metrics_frame()
    folder = staging / "tables" / "by-dataset"
    folder.mkdir(parents=True, exist_ok=True)
    texts: dict[str, dict[str, str]] = {}
    for dataset in sorted(set(metrics["dataset"])):
        part = metrics[metrics["dataset"] == dataset]
        for strategy in sorted(set(part["threshold"]) - {"none"}):
            text = render_table(comparison_table(part, strategy), "md")
            (folder / f"{dataset}-comparison-{strategy}.md").write_text(text, encoding="utf-8")
            texts.setdefault(dataset, {})[strategy] = text
    return texts


def entity_lists(work: Path) -> dict[str, list[str]]:
    from benchkit.store import Store

    with Store(work) as store:
        cells = store.cells_frame()
    return {
        d: sorted(set(cells.loc[cells["dataset"] == d, "entity"]))
        for d in sorted(set(cells["dataset"]))
    }


def readme_block(texts: dict[str, dict[str, str]], entities: dict[str, list[str]]) -> str:
    """The README block: one POT table per dataset; the tables' notes once, after the last."""
    lines = [README_START, ""]
    notes: list[str] = []
    for dataset, by_strategy in texts.items():
        names = ", ".join(entities.get(dataset, []))
        title = DATASET_TITLES.get(dataset, dataset)
        lines += [f"**{title}**, entities {names}:", ""]
        body = by_strategy[README_STRATEGY].split("\n", 2)[2].strip()  # drop the heading line
        lines += [row for row in body.splitlines() if not row.startswith(">")] + [""]
        notes = [row for row in body.splitlines() if row.startswith(">")]
    lines += [*notes, "", README_END]
    return "\n".join(lines)


def rewrite_readme(block: str) -> bool:
    """Replace the marked block in README.md; False (README untouched) without the markers."""
    text = README.read_text(encoding="utf-8")
    if README_START not in text or README_END not in text:
        return False
    head, rest = text.split(README_START, 1)
    tail = rest.split(README_END, 1)[1]
    README.write_text(head + block + tail, encoding="utf-8")
    return True


def replace_folder(staging: Path, target: Path) -> None:
    """Swap ``staging`` into ``target``; the old folder is removed only once the new one is in."""
    old = target.with_name(f".{target.name}.old")
    shutil.rmtree(old, ignore_errors=True)
    if target.exists():
        target.rename(old)
    staging.rename(target)
    shutil.rmtree(old, ignore_errors=True)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--data-root", type=Path, default=None, help="public data folder")
    parser.add_argument("--workers", type=int, default=None, help="worker processes")
    parser.add_argument(
        "--work",
        type=Path,
        default=None,
        help="run folder to keep (and resume) instead of a temporary one",
    )
    args = parser.parse_args(argv)
    root = (args.data_root or default_root()).absolute()
    if not (root / "server-machines").is_dir() or not (root / "app-servers").is_dir():
        print(f"public_run: no public data at {root} (set BENCHKIT_PUBLIC_DATA)", file=sys.stderr)
        return 2
    OUT.parent.mkdir(parents=True, exist_ok=True)
    with tempfile.TemporaryDirectory(prefix="public-run-") as tmp:
        work = args.work.absolute() if args.work else Path(tmp) / "run"
        seconds = run(root, args.workers, work)
        staging = Path(tempfile.mkdtemp(prefix=".public.", dir=OUT.parent))
        try:
            for name in KEPT:
                source = work / name
                if source.is_dir():
                    shutil.copytree(source, staging / name)
                elif source.is_file():
                    shutil.copy2(source, staging / name)
            texts = per_dataset_tables(work, staging)
            entities = entity_lists(work)
            replace_folder(staging, OUT)
        except BaseException:
            shutil.rmtree(staging, ignore_errors=True)
            raise
    n_entities = sum(len(v) for v in entities.values())
    updated = rewrite_readme(readme_block(texts, entities))
    print(f"public_run: {n_entities} entities; benchkit run took {seconds:.1f} s wall here")
    print(
        f"public_run: wrote {OUT.relative_to(REPO)}/; README section "
        f"{'rewritten' if updated else 'not found (markers missing), left as is'}"
    )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
