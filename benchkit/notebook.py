"""The Python API for notebooks: ``benchkit.run`` and ``benchkit.open_results``.

A thin layer over the functions the CLI calls: :func:`run` does what ``benchkit run`` does
(the same spec validation, results folder check, runner and report), :class:`Results` reads a
results folder with the same store queries and table builders as ``benchkit report`` and
``benchkit export``. Bad input raises :class:`~benchkit.errors.SpecError` or
:class:`~benchkit.errors.DataError` (both :class:`ValueError`), never exits.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

from benchkit.commands import run as run_command
from benchkit.errors import DataError, SpecError
from benchkit.report import write_all
from benchkit.report.build import check_choices, chosen_threshold
from benchkit.report.tables import CLEAN, DEFAULT_COLUMNS, comparison_table
from benchkit.runner import RunSummary
from benchkit.spec import ExperimentSpec, default_spec, load_spec, parse_spec, parse_toml
from benchkit.store import Store

if TYPE_CHECKING:
    import pandas as pd

SpecInput = str | Path | Mapping[str, Any] | ExperimentSpec | None


def as_spec(spec: SpecInput) -> ExperimentSpec:
    """A validated spec from a path, TOML text, a dict, an :class:`ExperimentSpec` or ``None``
    (the built-in default experiment).

    A string is read as a path when it is one line without ``=`` or names an existing file,
    else as TOML text. Relative dataset paths in TOML text or a dict are taken from the current
    folder; in a spec file, from the file's folder (as on the command line).
    """
    if spec is None:
        return default_spec()
    if isinstance(spec, ExperimentSpec):
        return spec
    if isinstance(spec, Path):
        return load_spec(spec)
    if isinstance(spec, str):
        one_line = "\n" not in spec
        if one_line and ("=" not in spec or Path(spec).is_file()):
            return load_spec(spec)
        return parse_toml(spec, "spec text")
    if isinstance(spec, Mapping):
        return parse_spec(dict(spec), "spec dict")
    raise SpecError(
        f"spec: expected a path, TOML text or a dict, got {type(spec).__name__}"
    )


def run(
    spec: SpecInput = None,
    out: str | Path | None = None,
    data_root: str | Path | None = None,
    quiet: bool = True,
    *,
    executor: str | None = None,
    workers: int | None = None,
) -> Results:
    """Run an experiment and write its report, as ``benchkit run`` does.

    Parameters
    ----------
    spec : a spec file path, TOML text, a dict in the TOML layout, or ``None`` for the built-in
        default experiment.
    out : results folder; an existing one is resumed (finished cells are not recomputed).
        ``None`` makes a new folder under ``results/runs/``.
    data_root : root folder for dataset TOMLs that need one (else ``$BENCHKIT_DATA_ROOT``).
    quiet : when False, show the progress bar and print the summary table as the CLI does.
    executor, workers : as ``--executor`` and ``--workers`` (default: the spec's settings).

    Returns
    -------
    Results of the folder; ``Results.summary`` counts computed, cached and failed cells.

    Raises
    ------
    SpecError, DataError : bad spec, data or results folder, before anything is written.
    """
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int)
                                or workers < 1):
        raise SpecError(f"workers: expected an integer >= 1, got {workers!r}")
    folder, summary = run_command.execute(
        as_spec(spec), out, executor=executor, workers=workers, quiet=quiet, data_root=data_root
    )
    if not quiet:
        run_command.print_summary(folder, summary)
    run_command.write_outputs(folder)
    return Results(folder, summary)


def open_results(out: str | Path) -> Results:
    """The results of an existing folder written by ``benchkit run`` (or :func:`run`).

    Raises DataError naming the folder when it holds no benchkit results.
    """
    folder = Path(out)
    with Store(folder) as store:  # DataError when there is no results store or no run
        store.latest_run()
    return Results(folder)


class Results:
    """The latest run of one results folder, read on demand (a rerun or ``benchkit rescore``
    into the same folder shows up at the next access).

    Attributes
    ----------
    out : the results folder.
    summary : what :func:`run` did (cells computed, cached, failed), or ``None`` when opened.
    """

    def __init__(self, out: str | Path, summary: RunSummary | None = None) -> None:
        self.out = Path(out)
        self.summary = summary

    def __repr__(self) -> str:
        return f"Results({str(self.out)!r})"

    @property
    def metrics(self) -> pd.DataFrame:
        """Tidy frame, one row per successful cell, threshold strategy and metric.

        Columns: ``cell_key``, ``variant``, ``detector``, ``dataset``, ``entity``, ``seed``,
        ``perturbation``, ``noise_kind``, ``noise_level``, ``noise_apply``, ``threshold``
        (``oracle``, ``pot``, ``quantile``, or ``none`` for threshold-free metrics), ``metric``,
        ``value``. The same frame ``benchkit export`` writes as ``metrics.csv``.
        """
        with Store(self.out) as store:
            return store.metrics_frame()

    @property
    def cells(self) -> pd.DataFrame:
        """One row per cell of the run: identity, ``status`` (``ok``, ``failed``, ``timeout``),
        ``error``, ``fit_seconds``, ``score_seconds``, ``points_per_second``, ``peak_memory_mb``,
        ``n_train``, ``n_test``. The same frame ``benchkit export`` writes as ``cells.csv``."""
        with Store(self.out) as store:
            return store.cells_frame()

    @property
    def run_info(self) -> dict[str, Any]:
        """The latest run's record: ``spec``, ``spec_toml``, ``environment``, ``fingerprints``,
        ``started_at``, ``finished_at``, ``summary``."""
        with Store(self.out) as store:
            return store.latest_run()

    def table(
        self, metric: str | Sequence[str] | None = None, threshold: str | None = None
    ) -> pd.DataFrame:
        """The comparison table of the report as a frame, one row per detector variant.

        Parameters
        ----------
        metric : one metric name or several (default: the report's columns, e.g. ``f1``,
            ``pa_f1``, ``range_f1``, ``roc_auc``).
        threshold : ``oracle``, ``pot`` or ``quantile`` (default: the first the run has, in
            that order). Threshold-free metrics are the same under every strategy.

        Returns
        -------
        Columns ``<metric>_mean`` and ``<metric>_std`` (over seeds, of the clean-data average
        over entities), ``pa_margin`` (PA-F1 over the random reference) and ``random_pa_f1``.
        """
        metrics = self.metrics
        names = DEFAULT_COLUMNS if metric is None else (
            (metric,) if isinstance(metric, str) else tuple(metric)
        )
        if metrics.empty:
            raise DataError(f"{self.out}: the latest run has no successful cell")
        for name in names:
            check_choices(metrics, name, threshold)
        return comparison_table(metrics, chosen_threshold(metrics, threshold), names).data

    def scores(
        self,
        variant: str,
        entity: str,
        seed: int | None = None,
        perturbation: str = CLEAN,
        dataset: str | None = None,
    ) -> dict[str, Any]:
        """The cached scores, labels and thresholds of one cell.

        Parameters
        ----------
        variant : detector variant (its label in the spec, else its name).
        entity : entity name, e.g. a demo node or a server machine.
        seed : needed when the run has several seeds.
        perturbation : ``"none"`` (clean data) or a noise key as in ``Results.cells``.
        dataset : needed when two datasets share the entity name.

        Returns
        -------
        ``test_scores``, ``train_scores``, ``labels``, ``warmup`` and the thresholds the cell's
        metrics used (``threshold_oracle_f1``, ``threshold_pot``, ``threshold_quantile``, ...).
        """
        cells = self.cells
        wanted = {"variant": variant, "entity": entity, "seed": seed,
                  "perturbation": perturbation, "dataset": dataset}
        chosen = cells
        for column, value in wanted.items():
            if value is None:
                continue
            match = chosen[chosen[column] == value]
            if match.empty:
                have = ", ".join(map(str, sorted(set(chosen[column])))) or "none"
                raise DataError(f"{column}: no cell with {column} {value!r}; there are: {have}")
            chosen = match
        if len(chosen) > 1:
            ambiguous = [c for c in ("seed", "dataset") if chosen[c].nunique() > 1]
            raise DataError(
                f"{' and '.join(ambiguous)}: {len(chosen)} cells match; give "
                + ", ".join(f"{c} (one of {sorted(set(chosen[c]))})" for c in ambiguous)
            )
        row = chosen.iloc[0]
        if row["status"] != "ok":
            raise DataError(f"cell {row['cell_key']}: status {row['status']}, no cached scores")
        with Store(self.out) as store:
            return store.load_scores(row["cell_key"])

    def report(
        self, fmt: str = "md", *, metric: str = "f1", threshold: str | None = None
    ) -> dict[str, Path]:
        """Write the report files, as ``benchkit report OUT`` does.

        Returns ``name -> path`` of every file written; ``["html"]`` is ``report.html``.
        """
        return write_all(self.out, fmt, metric=metric, threshold=threshold)
