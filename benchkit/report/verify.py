"""Re-run what a scorecard describes and compare every metric with it.

Cells are matched by cell key; a scorecard cell whose key the re-run lacks is matched by its
identifying fields (variant, dataset, entity, seed, perturbation), so changed input data shows up
as metric differences and a fingerprint mismatch rather than as missing cells. Two values agree
when both are missing (NaN / null) or when ``|a - b| <= tolerance`` (absolute).

Platforms: before values are compared, the scorecard's numeric environment is compared with the
re-run's (:func:`benchkit.numerics.exact_agreement_blockers`). Where they cannot give identical
bits (another architecture, other library versions, ``numerics = "fast"``), every difference is
still reported, and each is marked as one a platform change can explain when it lies within the
spread over seeds that the scorecard itself holds for that value (max - min over the seeds of
the same variant, dataset, entity, perturbation, threshold and metric; needs two or more seeds).
That spread is measured training variance, not a guessed tolerance. Exit 0 still means exact
agreement.
"""

from __future__ import annotations

import math
import tempfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from benchkit.errors import DataError
from benchkit.numerics import exact_agreement_blockers
from benchkit.report.scorecard import cell_records, load_scorecard
from benchkit.report.tables import Stat, Table
from benchkit.spec import parse_spec
from benchkit.store import DB_NAME, Store

MATCH_FIELDS = ("variant", "dataset", "entity", "seed", "perturbation")
SPREAD_FIELDS = ("variant", "dataset", "entity", "perturbation")


@dataclass(frozen=True)
class Difference:
    """One metric (or a cell's status) that differs beyond the tolerance."""

    cell_key: str
    cell: str
    threshold: str
    metric: str
    expected: float | str | None
    actual: float | str | None
    seed_spread: float | None = None

    @property
    def within_seed_spread(self) -> bool:
        """True when both values are numbers and differ by at most the scorecard's seed spread."""
        if self.seed_spread is None:
            return False
        if not all(isinstance(v, int | float) and not isinstance(v, bool)
                   for v in (self.expected, self.actual)):  # fmt: skip
            return False
        gap = abs(float(self.actual) - float(self.expected))  # type: ignore[arg-type]
        return math.isfinite(gap) and gap <= self.seed_spread


@dataclass
class VerifyResult:
    """What :func:`verify_scorecard` found; ``reproduced`` is the verdict."""

    scorecard: Path
    out: Path | None
    tolerance: float
    n_cells: int
    n_values: int
    differences: list[Difference] = field(default_factory=list)
    fingerprint_mismatches: dict[str, tuple[str | None, str | None]] = field(default_factory=dict)
    blockers: list[str] = field(default_factory=list)
    """Why exact agreement is not expected here (empty: same numeric environment)."""

    @property
    def reproduced(self) -> bool:
        """Exact agreement (within the tolerance): the only verdict that exits 0."""
        return not self.differences and not self.fingerprint_mismatches

    @property
    def exact_expected(self) -> bool:
        return not self.blockers

    def platform_explained(self, d: Difference) -> bool:
        """A difference a platform change can explain: platforms differ and it lies within the
        scorecard's spread over seeds."""
        return bool(self.blockers) and d.within_seed_spread

    @property
    def n_explained(self) -> int:
        return sum(self.platform_explained(d) for d in self.differences)

    @property
    def explained_by_platform(self) -> bool:
        """Not reproduced exactly, but on another platform and every difference explainable."""
        return (bool(self.blockers) and not self.fingerprint_mismatches
                and self.n_explained == len(self.differences))  # fmt: skip


def _describe(record: dict) -> str:
    return "/".join(str(record.get(f)) for f in MATCH_FIELDS)


def _long(records: dict[str, dict]) -> pd.DataFrame:
    rows = [
        (key, threshold, metric, math.nan if value is None else float(value))
        for key, record in records.items()
        for threshold, values in record["metrics"].items()
        for metric, value in values.items()
    ]
    return pd.DataFrame(rows, columns=["cell_key", "threshold", "metric", "value"])


def match_cells(expected: dict[str, dict], actual: dict[str, dict]) -> dict[str, str | None]:
    """Scorecard cell key -> re-run cell key (same key, else same identifying fields, else None)."""
    by_identity = {tuple(r.get(f) for f in MATCH_FIELDS): k for k, r in actual.items()}
    return {
        key: key
        if key in actual
        else by_identity.get(tuple(record.get(f) for f in MATCH_FIELDS))
        for key, record in expected.items()
    }


def seed_spreads(records: dict[str, dict]) -> dict[tuple[str, str, str], float]:
    """Per (cell key, threshold, metric): max - min over the seeds of the same variant, dataset,
    entity and perturbation, where the records hold two or more seeds with finite values."""
    rows = [
        (key, *(str(record.get(f)) for f in SPREAD_FIELDS), threshold, metric,
         math.nan if value is None else float(value))
        for key, record in records.items()
        for threshold, values in record["metrics"].items()
        for metric, value in values.items()
    ]  # fmt: skip
    if not rows:
        return {}
    columns = ["cell_key", *SPREAD_FIELDS, "threshold", "metric", "value"]
    frame = pd.DataFrame(rows, columns=columns)
    group = [*SPREAD_FIELDS, "threshold", "metric"]
    finite = frame.dropna(subset=["value"])
    stats = finite.groupby(group)["value"].agg(["max", "min", "count"])
    stats = stats[stats["count"] >= 2]
    spread = (stats["max"] - stats["min"]).rename("spread").reset_index()
    joined = frame.merge(spread, on=group, how="inner")
    return {
        (k, t, m): float(v)
        for k, t, m, v in joined[["cell_key", "threshold", "metric", "spread"]].itertuples(
            index=False
        )
    }


def compare_cells(
    expected: dict[str, dict], actual: dict[str, dict], tolerance: float
) -> list[Difference]:
    """Every status or metric of ``expected`` that ``actual`` lacks or holds differently."""
    mapping = match_cells(expected, actual)
    diffs = []
    for key, other in mapping.items():
        record = expected[key]
        got = actual[other]["status"] if other else "missing"
        if got != record["status"]:
            diffs.append(Difference(key, _describe(record), "-", "status", record["status"], got))
    exp = _long(expected)
    act = _long({k: actual[v] for k, v in mapping.items() if v is not None})
    merged = exp.merge(act, on=["cell_key", "threshold", "metric"], how="left",
                       suffixes=("_expected", "_actual"), indicator="side")
    a = merged["value_expected"].to_numpy(dtype=float)
    b = merged["value_actual"].to_numpy(dtype=float)
    both_missing = np.isnan(a) & np.isnan(b)
    with np.errstate(invalid="ignore"):
        close = np.abs(a - b) <= tolerance
    bad = ~(both_missing | close) | (merged["side"] == "left_only").to_numpy()
    mapped = {k for k, v in mapping.items() if v is not None}
    spreads = seed_spreads(expected)
    for row in merged[bad].itertuples(index=False):
        if row.cell_key not in mapped:
            continue  # already reported as a missing cell
        actual_value = None if row.side == "left_only" else row.value_actual
        diffs.append(
            Difference(row.cell_key, _describe(expected[row.cell_key]), row.threshold,
                       row.metric, row.value_expected, actual_value,
                       spreads.get((row.cell_key, row.threshold, row.metric)))
        )
    return diffs


def _choose_out(scorecard: Path, out: Path | None, fresh: bool) -> tuple[Path | None, bool]:
    """The folder to re-run into and whether it is a temporary one (``None`` = make a temp)."""
    if out is not None:
        out = Path(out)
        if fresh and (out / DB_NAME).exists():
            raise DataError(
                f"{out}: already holds a results store; --fresh needs an empty or new --out folder"
            )
        return out, False
    if not fresh and (scorecard.parent / DB_NAME).is_file():
        return scorecard.parent, False
    return None, True


def verify_scorecard(
    path: Path,
    tolerance: float = 1e-9,
    fresh: bool = False,
    out: Path | None = None,
    *,
    workers: int | None = None,
    data_root: Path | None = None,
    spec_dir: Path | None = None,
) -> VerifyResult:
    """Re-run the scorecard's spec and compare every metric with the scorecard.

    Parameters
    ----------
    path : the ``scorecard.json`` (its digest is checked first).
    tolerance : largest absolute difference still counted as equal.
    fresh : never reuse cached cells (re-run into a new temporary folder or an empty ``out``).
    out : re-run into this folder. By default the scorecard's own folder is used when it holds
        the results store (cached cells are reused where keys match), else a temporary folder
        that is removed afterwards.
    workers : local worker processes (default: the spec's setting).
    data_root : root folder for dataset TOMLs that need one (else ``$BENCHKIT_DATA_ROOT``).
    spec_dir : folder that relative dataset paths in the spec are taken from (the folder the
        original spec file was in; default: the current folder).

    Raises
    ------
    DataError, SpecError
        for a missing or malformed scorecard, a digest mismatch or an invalid spec.
    """
    from benchkit.runner import run_experiment  # noqa: I001  (the runner imports the store)

    path = Path(path)
    if not (tolerance >= 0 and math.isfinite(tolerance)):
        raise DataError(f"--tolerance: expected a number >= 0, got {tolerance!r}")
    content = load_scorecard(path)
    spec = parse_spec(content["spec"], f"{path}: spec", base_dir=Path(spec_dir or Path.cwd()))
    target, temporary = _choose_out(path, out, fresh)
    with tempfile.TemporaryDirectory(prefix="benchkit-verify-") as tmp:
        run_dir = Path(tmp) if temporary else target
        run_experiment(spec, run_dir, workers=workers, quiet=True, data_root=data_root)
        with Store(run_dir) as store:
            actual = cell_records(store.cells_frame(), store.metrics_frame())
            latest = store.latest_run()
            fingerprints = latest.get("fingerprints", {})
            local_numerics = (latest.get("environment") or {}).get("numerics") or {}
    expected = content["cells"]
    mismatched = {
        name: (fp, fingerprints.get(name))
        for name, fp in content["fingerprints"].items()
        if fingerprints.get(name) != fp
    }
    return VerifyResult(
        scorecard=path,
        out=None if temporary else run_dir,
        tolerance=tolerance,
        n_cells=len(expected),
        n_values=int(sum(len(v) for r in expected.values() for v in r["metrics"].values())),
        differences=compare_cells(expected, actual, tolerance),
        fingerprint_mismatches=mismatched,
        blockers=exact_agreement_blockers(
            (content.get("environment") or {}).get("numerics"), local_numerics
        ),
    )


def _value(v) -> Stat | str:
    if isinstance(v, int | float) and not isinstance(v, bool):
        return Stat(float(v), digits=6)
    return "missing" if v is None else str(v)


def differences_table(result: VerifyResult) -> Table:
    """The differences (and fingerprint mismatches) as a table, for printing."""
    rows = []
    for d in result.differences:
        both = isinstance(d.expected, int | float) and isinstance(d.actual, int | float)
        gap = Stat(abs(float(d.actual) - float(d.expected)), digits=6) if both else "-"
        spread = "-" if d.seed_spread is None else Stat(d.seed_spread, digits=6)
        platform = "yes" if result.platform_explained(d) else "no"
        rows.append((d.cell, d.threshold, d.metric, _value(d.expected), _value(d.actual), gap,
                     spread, platform))
    for name, (exp, got) in result.fingerprint_mismatches.items():
        rows.append((name, "-", "fingerprint", exp or "missing", got or "missing", "-", "-", "no"))
    notes = [
        f"cell = {'/'.join(MATCH_FIELDS)}",
        "seed spread = max - min of the value over the scorecard's seeds (needs two or more)",
        "platform = yes: the numeric environments differ and the difference lies within the "
        "seed spread, so a platform change can explain it",
    ]
    return Table(
        name="verify",
        title=f"Values that differ beyond tolerance {result.tolerance:g} (absolute)",
        headers=("cell", "threshold", "metric", "scorecard", "re-run", "|difference|",
                 "seed spread", "platform"),
        rows=tuple(rows),
        notes=tuple(notes),
    )


def platform_lines(result: VerifyResult) -> list[str]:
    """What the numeric environments say about exact agreement, for printing before values."""
    if result.exact_expected:
        return ["numeric environment: the same path as the scorecard's; exact agreement expected"]
    return ["numeric environment differs from the scorecard's; exact agreement is not expected:",
            *(f"  - {reason}" for reason in result.blockers)]
