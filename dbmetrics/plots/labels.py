"""Axis labels with units for the rollup and drift output columns (nats: natural log)."""

from __future__ import annotations

LABELS = {
    "cross_entropy": "cross-entropy (nats)",
    "ref_cross_entropy": "reference cross-entropy (nats)",
    "cross_entropy_delta": "change in cross-entropy (nats)",
    "cross_entropy_z": "cross-entropy change (standard errors)",
    "perplexity": "perplexity (exp of cross-entropy)",
    "accuracy": "accuracy (share correct)",
    "brier": "Brier score (0 to 2)",
    "ece": "ECE (probability)",
    "ref_ece": "reference ECE (probability)",
    "ece_delta": "change in ECE (probability)",
    "mean_confidence": "mean top-label confidence (probability)",
    "mean_entropy": "mean predictive entropy (nats)",
    "label_coverage": "label coverage (share of rows)",
    "confidence_gap": "mean confidence minus accuracy (probability)",
    "median_delay_days": "median label delay (days)",
    "p90_delay_days": "90th percentile of label delay (days)",
    "mean_delay_days": "mean label delay (days)",
    "max_delay_days": "largest label delay (days)",
    "prediction_kl": "prediction KL divergence (nats)",
    "prediction_js": "prediction JS divergence (nats)",
    "label_js": "label JS divergence (nats)",
    "confidence_psi": "confidence PSI (unitless)",
}


def metric_label(column: str) -> str:
    """``cross_entropy`` -> ``cross-entropy (nats)``; counts and unknown columns by name."""
    return LABELS.get(column, column.replace("_", " "))


#: how a period of each grain is named on an axis
PERIODS = {
    "day": "day",
    "week": "week (starting Monday)",
    "month": "month",
}


def period_label(grain: str) -> str:
    """The x-axis label of a period column at ``grain``: ``week (starting Monday)``."""
    return PERIODS.get(grain, "period")
