"""All thresholded metrics of one prediction, and their oracle (best-threshold) counterparts."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from benchkit.metrics.adjust import DEFAULT_KS, curve_mean, delay_adjust, pa_k_adjust, pa_k_f1_auc
from benchkit.metrics.best import BestF1, best_from_tally
from benchkit.metrics.diagnosis import DEFAULT_DIAGNOSIS_P
from benchkit.metrics.event_level import composite_f1, detection_delays, event_recall
from benchkit.metrics.inputs import MetricInputError, binary_pair, scores_and_labels
from benchkit.metrics.pointwise import confusion, counts_to_prf, prf
from benchkit.metrics.range_based import check_range_options, range_precision_recall
from benchkit.metrics.range_best import best_range_f1
from benchkit.metrics.ranking import RankedScores


@dataclass(frozen=True)
class MetricOptions:
    """Parameters of the adjusted and range-based metrics (the spec's ``[metrics]`` table).

    Attributes
    ----------
    pa_k : K values (integer percent, 0 to 100) reported as ``pak{K}_f1``.
    delay : delay bound in steps for ``delay_*`` (an event counts when detected at most this many
        steps after its first point).
    range_alpha, range_cardinality, range_bias : α, γ and δ of the range-based metrics.
    diagnosis_p : P values (integer percent, 1 to 1000) of HitRate@P% and NDCG@P%, reported as
        ``hit_rate@{P}`` and ``ndcg@{P}`` where events name culprit KPIs.
    """

    pa_k: tuple[int, ...] = (5, 20, 50)
    delay: int = 7
    range_alpha: float = 0.0
    range_cardinality: str = "one"
    range_bias: str = "flat"
    diagnosis_p: tuple[int, ...] = DEFAULT_DIAGNOSIS_P

    def __post_init__(self) -> None:
        object.__setattr__(self, "pa_k", _int_list(self.pa_k, "pa_k", 0, 100))
        if isinstance(self.delay, bool) or not isinstance(self.delay, (int, np.integer)) or (
            self.delay < 0
        ):
            raise MetricInputError(f"metrics.delay: expected an integer >= 0, got {self.delay!r}")
        try:
            alpha = check_range_options(self.range_alpha, self.range_cardinality, self.range_bias)
        except MetricInputError as exc:
            raise MetricInputError(f"metrics.range_{exc}") from None
        object.__setattr__(self, "range_alpha", alpha)
        object.__setattr__(self, "delay", int(self.delay))
        object.__setattr__(self, "diagnosis_p", _int_list(self.diagnosis_p, "diagnosis_p", 1, 1000))

    def metric_names(self) -> tuple[str, ...]:
        """The keys of :func:`metric_set` and :func:`oracle_metric_set`, in report order."""
        return (
            "precision", "recall", "f1", "pa_precision", "pa_recall", "pa_f1",
            *(f"pak{k}_f1" for k in self.pa_k), "pak_auc_f1",
            "delay_precision", "delay_recall", "delay_f1",
            "event_recall", "composite_f1", "delay_mean", "delay_median",
            "range_precision", "range_recall", "range_f1",
        )  # fmt: skip


def _int_list(values: object, key: str, low: int, high: int) -> tuple[int, ...]:
    """``values`` as a tuple of distinct integers in ``[low, high]``, or MetricInputError."""
    if isinstance(values, (str, bytes)) or not hasattr(values, "__iter__"):
        raise MetricInputError(f"metrics.{key}: expected a list of integers, got {values!r}")
    out = tuple(values)
    for v in out:
        if isinstance(v, bool) or not isinstance(v, (int, np.integer)) or not low <= v <= high:
            raise MetricInputError(f"metrics.{key}: {v!r} is not an integer from {low} to {high}")
    if len(set(out)) != len(out):
        raise MetricInputError(f"metrics.{key}: repeated values in {list(out)}")
    return tuple(int(v) for v in out)


def _named(prefix: str, values: tuple[float, float, float]) -> dict[str, float]:
    return dict(zip((f"{prefix}precision", f"{prefix}recall", f"{prefix}f1"), values, strict=True))


def _event_metrics(pred: np.ndarray, labels: np.ndarray) -> dict[str, float]:
    mean, median = detection_delays(pred, labels)
    return {
        "event_recall": event_recall(pred, labels),
        "composite_f1": composite_f1(pred, labels),
        "delay_mean": mean,
        "delay_median": median,
    }


def _range_metrics(values: tuple[float, float, float]) -> dict[str, float]:
    return _named("range_", values)


def metric_set(
    pred: object, labels: object, options: MetricOptions = MetricOptions()
) -> dict[str, float]:
    """Every thresholded metric of one 0/1 prediction (names in ``options.metric_names()``)."""
    p, y = binary_pair(pred, labels)
    out = _named("", counts_to_prf(*confusion(p, y)))
    out.update(_named("pa_", prf(pa_k_adjust(p, y, 0), y)))
    for k in options.pa_k:
        out[f"pak{k}_f1"] = prf(pa_k_adjust(p, y, k), y)[2]
    out["pak_auc_f1"] = pa_k_f1_auc(p, y)
    out.update(_named("delay_", prf(delay_adjust(p, y, options.delay), y)))
    out.update(_event_metrics(p, y))
    out.update(_range_metrics(range_precision_recall(
        p, y, options.range_alpha, options.range_cardinality, options.range_bias
    )))  # fmt: skip
    return out


def _best_values(prefix: str, best: BestF1) -> dict[str, float]:
    return _named(prefix, (best.precision, best.recall, best.f1))


def oracle_metric_set(
    scores: object, labels: object, options: MetricOptions = MetricOptions()
) -> tuple[dict[str, float], dict[str, float]]:
    """Each thresholded metric at its own best threshold on these labels (the oracle strategy).

    Returns
    -------
    (metrics, thresholds). ``metrics`` has the keys of :func:`metric_set`: point-wise, PA,
    each PA%K, delay-bounded and range-based values at their own best-F1 threshold;
    ``pak_auc_f1`` is the area under best-F1 versus K (K = 0..100) over 100; event metrics are
    taken at the point-wise best threshold. ``thresholds`` maps ``f1``, ``pa_f1``,
    ``pak{K}_f1``, ``delay_f1`` and ``range_f1`` to the threshold used (+inf: predict nothing).
    """
    s, y = scores_and_labels(scores, labels)
    ranked = RankedScores(s, y)
    best: dict[str, BestF1] = {
        "f1": best_from_tally(ranked, ranked.effective(None)),
        "pa_f1": best_from_tally(ranked, ranked.effective("point")),
        **{
            f"pak{k}_f1": best_from_tally(ranked, ranked.effective("pa%k", k))
            for k in options.pa_k
        },
        "delay_f1": best_from_tally(ranked, ranked.effective("delay", delay=options.delay)),
    }
    best["range_f1"] = best_range_f1(
        s, y, options.range_alpha, options.range_cardinality, options.range_bias,
        extra_thresholds=[result.threshold for result in best.values()],
    )  # fmt: skip
    by_k = [best_from_tally(ranked, ranked.effective("pa%k", float(k))).f1 for k in DEFAULT_KS]
    out = _best_values("", best["f1"])
    out.update(_best_values("pa_", best["pa_f1"]))
    out.update({f"pak{k}_f1": best[f"pak{k}_f1"].f1 for k in options.pa_k})
    out["pak_auc_f1"] = curve_mean(np.asarray(by_k), DEFAULT_KS.astype(np.float64))
    out.update(_best_values("delay_", best["delay_f1"]))
    out.update(_event_metrics(s >= best["f1"].threshold, y))
    out.update(_best_values("range_", best["range_f1"]))
    return out, {name: result.threshold for name, result in best.items()}
