"""Calibration bins summed over periods (and segments): counts and sums add, averages do not.

Per bin b of a group: n_b = sum rows, correct_b = sum rows * accuracy,
confidence_b = sum rows * mean_confidence; then accuracy_b = correct_b / n_b,
mean confidence = confidence_b / n_b and ECE = sum_b |correct_b - confidence_b| / sum_b n_b,
the same top-label ECE the calibration query gives for a single period. Each pooled bin's
accuracy has its 95% Wilson interval, computed from the pooled counts.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pyarrow as pa

from dbmetrics.kernels.significance import Z95
from dbmetrics.plots.rows import text


def _wilson_interval(correct: np.ndarray, rows: np.ndarray, z: float = Z95) -> tuple:
    """(low, high): the Wilson (1927) score interval of the share correct / rows, elementwise,

        (p + z^2/2n -+ z sqrt(p (1 - p)/n + z^2/4n^2)) / (1 + z^2/n),  p = correct / n,

    clipped to [0, 1]; z = 1.96 gives scipy.stats.binomtest(k, n).proportion_ci(method='wilson').
    """
    n = rows.astype(float)
    p = correct / n
    center = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * np.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return np.maximum(center - half, 0.0), np.minimum(center + half, 1.0)


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
    def accuracy_interval(self) -> tuple:
        """(low, high) per bin: the 95% Wilson interval of the bin's accuracy."""
        return _wilson_interval(np.round(self.accuracy * self.rows), self.rows)

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


def confidence_gap(calibration: pa.Table, keys: tuple[str, ...]) -> pa.Table:
    """Per period and value of ``keys``: mean confidence minus accuracy over its evaluated
    rows (positive: over-confident), from the calibration query's bins.

    confidence_gap = (sum_b rows_b * mean_confidence_b - sum_b rows_b * accuracy_b) / sum_b rows_b,
    with evaluated_rows = sum_b rows_b.
    """
    columns = ["period", *keys]
    groups = list(zip(*(calibration[c].to_pylist() for c in columns)))
    rows = calibration["rows"].to_numpy(zero_copy_only=False).astype(float)
    excess = rows * (
        calibration["mean_confidence"].to_numpy(zero_copy_only=False)
        - calibration["accuracy"].to_numpy(zero_copy_only=False)
    )
    distinct = sorted(set(groups), key=lambda g: tuple(map(text, g)))
    index = {g: i for i, g in enumerate(distinct)}
    at = np.array([index[g] for g in groups], dtype=np.int64)
    total = np.bincount(at, weights=rows, minlength=len(distinct))
    gap = np.bincount(at, weights=excess, minlength=len(distinct)) / total
    out = {c: [g[j] for g in distinct] for j, c in enumerate(columns)}
    out["evaluated_rows"] = total.astype(np.int64)
    out["confidence_gap"] = gap
    schema = [calibration.schema.field(c) for c in columns]
    return pa.table(
        [pa.array(out[f.name], f.type) for f in schema]
        + [pa.array(out["evaluated_rows"]), pa.array(out["confidence_gap"])],
        names=[*columns, "evaluated_rows", "confidence_gap"],
    )
