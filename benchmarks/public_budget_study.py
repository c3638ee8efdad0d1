"""Budget study of the deep detectors on the public server-machine data (Su et al., KDD 2019).

For ``factorized-vae`` and ``lstm-vae``, one factor at a time around the defaults, two seeds each,
on three server machines read from ``../shared/data/public/server-machines`` (never copied):

* training budget, windows per epoch x epochs (256 x 10, 1024 x 10, 4096 x 10; early stopping by
  validation loss stays on, patience 2);
* ``constant_channels``: keep, drop, clip;
* window length: 16, 32, 64.

Each cell follows the protocol of ``benchkit run``: z-score scaling fitted on train, the
constant-channel rule, fit on train, score the test part with ``window - 1`` train steps of
context. Reported per setting: point-wise best F1 and PA-F1 (oracle thresholds: they peek at the
test labels), event recall at an alert budget (the top 1 % of test steps by score flagged; a
fixed share, not tuned on labels), fit seconds, epochs run and why training stopped.

Diagnosis of "more training is worse": while scoring, the per-channel negative log-likelihood
of each window's last point is recorded (the terms the score sums). For every cell it reports the
F1 of the score summed over the channels that vary in train only, the median decoder standard
deviation on the channels constant in train, and the share of the top 1 % test scores whose
largest per-channel term comes from a channel constant in train.

Run: ``.venv/bin/python benchmarks/public_budget_study.py`` (about 10-15 minutes with two jobs on
2 cores; ``--quick`` for a small smoke run). Writes ``results/public-budget-study.md`` and
``results/public-budget-study.csv``. Timings depend on the machine and its load.
"""

from __future__ import annotations

import argparse
import math
import multiprocessing
import os
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
for _var in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS"):
    os.environ[_var] = "1"

import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import torch  # noqa: E402

from benchkit import registry  # noqa: E402
from benchkit.data.split_folder import load_split_folder  # noqa: E402
from benchkit.metrics import best_f1, event_recall  # noqa: E402
from benchkit.windows import Scaler, constant_in_train, handle_constant_channels  # noqa: E402

PUBLIC = Path(os.environ.get("BENCHKIT_PUBLIC_DATA", ROOT.parent / "shared" / "data" / "public"))
ENTITIES = ("machine-1-6", "machine-2-1", "machine-3-3")
SEEDS = (0, 1)
DETECTORS = ("factorized-vae", "lstm-vae")
ALERT_SHARE = 0.01  # the alert budget: the top 1 % of test steps by score are flagged
BUDGETS = ((256, 10), (1024, 10), (4096, 10))
WINDOWS = (16, 32, 64)
CONSTANT_RULES = ("keep", "drop", "clip")
_DATA: dict = {}  # entities loaded once in the parent; forked workers inherit them


def settings(quick: bool) -> list[tuple[str, str, dict, str]]:
    """``(axis, label, params, constant_channels)``: one factor at a time around the defaults
    (1024 x 10, window 32, keep); the shared default setting is listed once, on the budget axis.
    """
    out = [("budget", f"{per_epoch} x {epochs}",
            {"max_train_windows": per_epoch, "max_epochs": epochs}, "keep")
           for per_epoch, epochs in (BUDGETS[:2] if quick else BUDGETS)]  # fmt: skip
    out += [("constant", rule, {}, rule) for rule in CONSTANT_RULES[1:]]
    out += [("window", f"window {w}", {"window": w}, "keep")
            for w in (WINDOWS[:1] if quick else WINDOWS) if w != 32]  # fmt: skip
    return out


class ChannelTerms:
    """Records the elementwise Gaussian NLL terms (and log-variances) a detector sums."""

    def __init__(self, module) -> None:
        self.module, self.original = module, module.gaussian_nll
        self.nll: list[torch.Tensor] = []
        self.logvar: list[torch.Tensor] = []

    def __enter__(self) -> ChannelTerms:
        def recording(x, mean, logvar):
            out = self.original(x, mean, logvar)
            self.nll.append(out.detach().reshape(out.shape[0], -1))
            self.logvar.append(logvar.detach().reshape(out.shape[0], -1))
            return out

        self.module.gaussian_nll = recording
        return self

    def __exit__(self, *exc) -> None:
        self.module.gaussian_nll = self.original

    def arrays(self) -> tuple[np.ndarray, np.ndarray]:
        return (torch.cat(self.nll).double().numpy(), torch.cat(self.logvar).double().numpy())


def alert_recall(scores: np.ndarray, labels: np.ndarray) -> float:
    """Event recall when the top :data:`ALERT_SHARE` of test steps by score are flagged."""
    k = max(1, int(round(ALERT_SHARE * scores.size)))
    flagged = np.zeros(scores.size, dtype=np.int8)
    flagged[np.argsort(-scores, kind="stable")[:k]] = 1
    return event_recall(flagged, labels)


def run_one(job: tuple) -> dict:
    """Fit and score one (detector, setting, entity, seed); the metrics and diagnostics."""
    name, (axis, label, params, rule), entity_name, seed = job
    torch.set_num_threads(1)
    entity = _DATA[entity_name]
    scaler = Scaler("zscore").fit(entity.train)
    const = constant_in_train(entity.train)
    train, test, kept = handle_constant_channels(
        scaler.transform(entity.train), scaler.transform(entity.test), rule
    )
    detector = registry.create(name, **params, seed=seed, threads=1)
    start = time.perf_counter()
    detector.fit(train)
    fit_seconds = time.perf_counter() - start
    warmup = detector.warmup
    module = sys.modules[type(detector).__module__]
    with ChannelTerms(module) as terms:
        scores = detector.score(np.vstack([train[len(train) - warmup:], test]))[warmup:]
    nll, logvar = terms.arrays()  # (windows, channels), one row per scored test step
    labels = np.asarray(entity.labels, dtype=np.int8)
    record = detector.training_record()
    row = {
        "detector": name, "axis": axis, "setting": label, "constant_channels": rule,
        "window": detector.window, "windows_per_epoch": detector.max_train_windows,
        "max_epochs": detector.max_epochs, "entity": entity_name, "seed": seed,
        "f1": best_f1(scores, labels).f1, "pa_f1": best_f1(scores, labels, "point").f1,
        "alert_event_recall": alert_recall(scores, labels), "fit_seconds": fit_seconds,
        "epochs_run": record["stop_epoch"] + 1, "stop_reason": record["stop_reason"],
        "best_epoch": record["best_epoch"], "constant_in_train": int(const.sum()),
    }  # fmt: skip
    const_kept = const[kept]
    row["f1_varying_channels_only"] = best_f1(nll[:, ~const_kept].sum(axis=1), labels).f1
    if const_kept.any():
        top = np.argsort(-scores, kind="stable")[: max(1, int(round(ALERT_SHARE * scores.size)))]
        row["top_alerts_led_by_constant"] = float(const_kept[nll[top].argmax(axis=1)].mean())
        row["decoder_std_constant"] = float(np.median(np.exp(0.5 * logvar[:, const_kept])))
    else:
        row["top_alerts_led_by_constant"] = math.nan
        row["decoder_std_constant"] = math.nan
    row["decoder_std_varying"] = float(np.median(np.exp(0.5 * logvar[:, ~const_kept])))
    top = np.argsort(-scores, kind="stable")[: max(1, int(round(ALERT_SHARE * scores.size)))]
    leaders, counts = np.unique(kept[nll[top].argmax(axis=1)], return_counts=True)
    train_std, test_std = entity.train.std(axis=0), entity.test.std(axis=0)
    order = np.argsort(-counts, kind="stable")[:3]
    row["top_alert_leaders"] = "; ".join(
        f"KPI {leaders[i] + 1} ({counts[i] / top.size:.0%}, std train {train_std[leaders[i]]:.2g}"
        f" test {test_std[leaders[i]]:.2g})" for i in order
    )
    return row


def summarise(frame: pd.DataFrame) -> pd.DataFrame:
    """Per detector and setting: means over entities and seeds, spread over seeds."""
    keys = ["detector", "axis", "setting", "constant_channels"]
    per_seed = frame.groupby([*keys, "seed"], sort=False)[["f1", "pa_f1", "alert_event_recall"]]
    spread = per_seed.mean().groupby(keys, sort=False).std(ddof=1).add_suffix("_seed_std")
    means = frame.groupby(keys, sort=False).agg(
        f1=("f1", "mean"), pa_f1=("pa_f1", "mean"),
        alert_event_recall=("alert_event_recall", "mean"),
        fit_seconds=("fit_seconds", "mean"), epochs_run=("epochs_run", "mean"),
        stopped_at_max_epochs=("stop_reason", lambda s: int((s == "max_epochs").sum())),
        cells=("f1", "size"),
        f1_varying_channels_only=("f1_varying_channels_only", "mean"),
        top_alerts_led_by_constant=("top_alerts_led_by_constant", "mean"),
        decoder_std_constant=("decoder_std_constant", "median"),
        decoder_std_varying=("decoder_std_varying", "median"),
    )  # fmt: skip
    return means.join(spread).reset_index()


def markdown(frame: pd.DataFrame, summary: pd.DataFrame, seconds: float, jobs: int) -> str:
    """The study's report: setup, the summary table, F1 per machine, the diagnosis."""
    def fmt(v, digits=3):
        return "n/a" if not np.isfinite(v) else f"{v:.{digits}f}"

    lines = [
        "# Budget study of the deep detectors on public server-machine data",
        "",
        "Written by `benchmarks/public_budget_study.py` (do not edit by hand). Data: "
        "server-machine data (Su et al., KDD 2019), machines " + ", ".join(ENTITIES) +
        f"; z-score scaling fitted on train; seeds {', '.join(map(str, SEEDS))}; one torch "
        f"thread per cell, {jobs} cells at a time on a shared 2-core machine (timings are "
        f"noisy); whole study {seconds / 60:.1f} min.",
        "",
        "F1 and PA-F1 use oracle thresholds (best F1 on the test labels: they peek at the "
        "labels and show the best case, not a deployed result); PA-F1 is point-adjusted and "
        "overstates. Alert recall: share of labelled events with at least one of the top "
        f"{ALERT_SHARE:.0%} test steps by score (a fixed alert budget). Values are means over "
        "3 machines x 2 seeds; ± is the sample std over the two per-seed means. A benchmark "
        "result is no guarantee for a production system. The alert recall here is a fixed "
        "top-1 % proxy computed by this script; it is not the train-calibrated alert-budget "
        "threshold of `[thresholds] alert_budget`, which this study does not run.",
        "",
        "| detector | axis | setting | constant channels | F1 | PA-F1 | alert recall | "
        "fit s | epochs run | stopped at max_epochs | F1 of varying channels only | "
        "top alerts led by a constant channel | decoder std, constant ch. | "
        "decoder std, varying ch. |",
        "|---|---|---|---|---|---|---|---|---|---|---|---|---|---|",
    ]
    for r in summary.to_dict("records"):
        lines.append(
            f"| {r['detector']} | {r['axis']} | {r['setting']} | {r['constant_channels']} | "
            f"{fmt(r['f1'])} ± {fmt(r['f1_seed_std'])} | "
            f"{fmt(r['pa_f1'])} ± {fmt(r['pa_f1_seed_std'])} | "
            f"{fmt(r['alert_event_recall'])} ± {fmt(r['alert_event_recall_seed_std'])} | "
            f"{fmt(r['fit_seconds'], 1)} | {fmt(r['epochs_run'], 1)} | "
            f"{r['stopped_at_max_epochs']}/{r['cells']} | {fmt(r['f1_varying_channels_only'])} | "
            f"{fmt(r['top_alerts_led_by_constant'], 2)} | {fmt(r['decoder_std_constant'], 3)} | "
            f"{fmt(r['decoder_std_varying'], 3)} |"
        )
    pivot = frame.pivot_table(index=["detector", "axis", "setting", "constant_channels"],
                              columns="entity", values="f1", aggfunc="mean", sort=False)
    lines += ["", "## Point-wise F1 per machine (mean of the two seeds)", "",
              "| detector | axis | setting | constant channels | " + " | ".join(pivot.columns) +
              " |", "|---|---|---|---|" + "---|" * len(pivot.columns)]  # fmt: skip
    for idx, values in pivot.iterrows():
        lines.append("| " + " | ".join(map(str, idx)) + " | " +
                     " | ".join(fmt(v) for v in values) + " |")  # fmt: skip
    counts = frame.groupby("entity")["constant_in_train"].first()
    lines += ["", "KPIs constant over train: " +
              ", ".join(f"{e} {n} of 38" for e, n in counts.items()) + ".", ""]  # fmt: skip
    lines += ["## Which KPIs lead the top alerts (budget axis)", "",
              "For the top 1 % of test steps by score: the KPI with the largest per-channel NLL "
              "term, its share of those steps, and its standard deviation in train and in test "
              "(published [0, 1] scale). Decoder std: median predicted standard deviation on "
              "the KPIs that vary in train (z-scored units).", "",
              "| detector | setting | machine | seed | F1 | epochs run | stop | decoder std "
              "| leading KPIs |", "|---|---|---|---|---|---|---|---|---|"]  # fmt: skip
    for r in frame[frame["axis"] == "budget"].to_dict("records"):
        lines.append(f"| {r['detector']} | {r['setting']} | {r['entity']} | {r['seed']} | "
                     f"{fmt(r['f1'])} | {r['epochs_run']} | {r['stop_reason']} | "
                     f"{fmt(r['decoder_std_varying'])} | {r['top_alert_leaders']} |")  # fmt: skip
    return "\n".join(lines) + "\n"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--jobs", type=int, default=2, help="cells at a time (default 2)")
    parser.add_argument("--quick", action="store_true",
                        help="one machine, one seed, fewer settings")
    parser.add_argument("--out", default=str(ROOT / "results" / "public-budget-study.md"),
                        help="markdown output (a .csv of every cell is written beside it)")
    parser.add_argument("--render", nargs=2, metavar=("CSV", "MINUTES"),
                        help="only rewrite the markdown from a finished study's CSV and its "
                             "recorded run time, without refitting")  # fmt: skip
    args = parser.parse_args()
    if args.render:
        frame = pd.read_csv(args.render[0], keep_default_na=False, na_values=[""])
        text = markdown(frame, summarise(frame), 60 * float(args.render[1]), args.jobs)
        Path(args.out).write_text(text, encoding="utf-8")
        print(text)
        return
    if not (PUBLIC / "server-machines").is_dir():
        sys.exit(f"{PUBLIC / 'server-machines'}: public data not found (BENCHKIT_PUBLIC_DATA)")
    entities = ENTITIES[:1] if args.quick else ENTITIES
    seeds = SEEDS[:1] if args.quick else SEEDS
    jobs = [(name, s, e, seed) for name in DETECTORS for s in settings(args.quick)
            for e in entities for seed in seeds]  # fmt: skip
    jobs.sort(key=lambda j: -j[1][2].get("max_train_windows", 1024)
              * j[1][2].get("max_epochs", 10))  # the longest first, for a balanced finish
    dataset = load_split_folder(PUBLIC / "server-machines")
    _DATA.update({e.name: e for e in dataset.entities if e.name in entities})
    start = time.perf_counter()
    rows = []
    with multiprocessing.get_context("fork").Pool(args.jobs) as pool:
        for i, row in enumerate(pool.imap_unordered(run_one, jobs), 1):
            rows.append(row)
            print(f"[{i}/{len(jobs)}] {row['detector']} {row['setting']} "
                  f"{row['constant_channels']} {row['entity']} seed {row['seed']}: "
                  f"F1 {row['f1']:.3f}, fit {row['fit_seconds']:.1f} s", flush=True)  # fmt: skip
    seconds = time.perf_counter() - start
    order = {s[1] + s[3]: i for i, s in enumerate(settings(args.quick))}
    frame = pd.DataFrame(rows)
    frame["_order"] = (frame["setting"] + frame["constant_channels"]).map(order)
    frame = frame.sort_values(["detector", "_order", "entity", "seed"]).drop(columns="_order")
    summary = summarise(frame)
    text = markdown(frame, summary, seconds, args.jobs)
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    frame.to_csv(out.with_suffix(".csv"), index=False, float_format="%.6g")
    out.write_text(text, encoding="utf-8")
    print(text)


if __name__ == "__main__":
    main()
