"""Calibration bins summed over periods (and segments): counts and sums add, averages do not.

Per bin b of a group: n_b = sum rows, correct_b = sum rows * accuracy,
confidence_b = sum rows * mean_confidence; then accuracy_b = correct_b / n_b,
mean confidence = confidence_b / n_b and ECE = sum_b |correct_b - confidence_b| / sum_b n_b,
the same top-label ECE the calibration query gives for a single period.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from dbmetrics.plots.rows import text


@dataclass(frozen=True)
class Pooled:
    """One group's pooled reliability curve over its non-empty bins, in bin order."""

    group: str
    bin_lower: np.ndarray
    bin_upper: np.ndarray
    rows: np.ndarray
    mean_confidence: np.ndarray
    accuracy: np.ndarray

    @property
    def evaluated_rows(self) -> int:
        return int(self.rows.sum())

    @property
    def ece(self) -> float:
        return float(
            np.sum(self.rows * np.abs(self.accuracy - self.mean_confidence)) / self.rows.sum()
        )


def pool_bins(calibration: pa.Table, by: str) -> list[Pooled]:
    """Sum the calibration query's bin rows per value of ``by``; groups in sorted order."""
    columns = {
        c: calibration[c].to_numpy(zero_copy_only=False)
        for c in ("bin", "bin_lower", "bin_upper", "rows", "mean_confidence", "accuracy")
    }
    groups = np.array([text(v) for v in calibration[by].to_pylist()], dtype=object)
    pooled = []
    for group in sorted(set(groups)):
        at = groups == group
        bins, index = np.unique(columns["bin"][at], return_inverse=True)
        rows = np.bincount(index, weights=columns["rows"][at], minlength=len(bins))
        confidence = np.bincount(
            index, weights=(columns["rows"] * columns["mean_confidence"])[at], minlength=len(bins)
        )
        correct = np.bincount(
            index, weights=(columns["rows"] * columns["accuracy"])[at], minlength=len(bins)
        )
        first = np.unique(index, return_index=True)[1]
        pooled.append(
            Pooled(
                group,
                columns["bin_lower"][at][first],
                columns["bin_upper"][at][first],
                rows.astype(np.int64),
                confidence / rows,
                correct / rows,
            )
        )
    return pooled
