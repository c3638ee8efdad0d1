"""The cautions printed with tables and in the HTML report, worded once."""

from __future__ import annotations

ORACLE = (
    "Oracle thresholds peek at the test labels: they show the best a detector could reach with a "
    "perfectly tuned threshold, not what it reaches when deployed. This holds for 'oracle' and "
    "for 'alert-budget-oracle' (best event recall within the alert budget on test). Compare the "
    "pot, quantile and alert-budget tables for realistic thresholds."
)
POINT_ADJUSTED = (
    "Point-adjusted scores overstate: one hit inside an event credits the whole event, so even "
    "random scores reach a high PA-F1 on long events. Read each detector's margin over the random "
    "reference, not the PA-F1 itself."
)
NO_GUARANTEE = (
    "A benchmark result is no guarantee for a production system: your incidents, noise, drift and "
    "label quality differ from any labelled history."
)

ALL = (ORACLE, POINT_ADJUSTED, NO_GUARANTEE)
