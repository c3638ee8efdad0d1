"""Evaluation metrics: pure numpy functions on arrays, no I/O.

Conventions
-----------
- Labels and predictions are 1-D 0/1 (or bool) arrays; scores are 1-D floats, higher = more
  anomalous, where ``-inf`` (warm-up) is allowed and never predicted, and NaN or +inf is an error.
- A threshold θ predicts ``scores >= θ``. Events are inclusive ``[start, end]`` runs of ones.
- A ratio with a zero denominator is 0.0 (no predictions: precision 0; no labelled events:
  recall 0), as scikit-learn's ``zero_division=0``. Detection delays are NaN when nothing is
  detected; ROC-AUC and PR-AUC are NaN when the labels hold a single class.
- Bad input raises :class:`MetricInputError` (a ``ValueError``) naming the argument.
"""

from benchkit.metrics.adjust import delay_adjust, pa_k_adjust, pa_k_f1_auc, point_adjust
from benchkit.metrics.alerts import (
    ALERT_METRICS,
    AlertCurve,
    alert_curve,
    alert_metrics,
    count_alerts,
)
from benchkit.metrics.best import BestF1, F1Curve, best_f1, f1_curve
from benchkit.metrics.diagnosis import (
    DEFAULT_DIAGNOSIS_P,
    chance_hit_rate,
    diagnosis_metrics,
    hit_rate,
    kind_recall,
    ndcg_at,
)
from benchkit.metrics.event_level import composite_f1, detection_delays, event_recall
from benchkit.metrics.events import events_to_labels, labels_to_events
from benchkit.metrics.inputs import MetricInputError
from benchkit.metrics.metric_set import MetricOptions, metric_set, oracle_metric_set
from benchkit.metrics.pointwise import prf
from benchkit.metrics.range_based import range_precision_recall
from benchkit.metrics.range_best import best_range_f1
from benchkit.metrics.reference import random_pa_f1
from benchkit.metrics.threshold_free import pr_auc, roc_auc

__all__ = [
    "ALERT_METRICS",
    "AlertCurve",
    "DEFAULT_DIAGNOSIS_P",
    "BestF1",
    "F1Curve",
    "MetricInputError",
    "MetricOptions",
    "alert_curve",
    "alert_metrics",
    "best_f1",
    "best_range_f1",
    "chance_hit_rate",
    "composite_f1",
    "count_alerts",
    "delay_adjust",
    "detection_delays",
    "diagnosis_metrics",
    "event_recall",
    "events_to_labels",
    "f1_curve",
    "hit_rate",
    "kind_recall",
    "labels_to_events",
    "metric_set",
    "ndcg_at",
    "oracle_metric_set",
    "pa_k_adjust",
    "pa_k_f1_auc",
    "point_adjust",
    "pr_auc",
    "prf",
    "random_pa_f1",
    "range_precision_recall",
    "roc_auc",
]
