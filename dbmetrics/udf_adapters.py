"""Adapters that turn numpy kernels into Arrow-in / Arrow-out DuckDB UDF bodies.

Each factory takes a kernel over float64 matrices and returns a function of
pyarrow arrays. Structural errors (label out of range, class counts that differ
between two lists) raise ValueError naming the SQL function and the bad value;
value problems (NaN, not a distribution) give NULL.
"""

import numpy as np
import pyarrow as pa

from .arrow_lists import (
    booleans,
    doubles,
    float_column,
    integer_column,
    integers,
    list_of_doubles,
    score_matrix,
    single_array,
)
from .binary_scores import pair
from .kernels.distributions import as_distribution
from .kernels.losses import temperature_scaled_losses
from .kernels.predictions import calibration_bin, predicted_class
from .kernels.row_stats import RowStats
from .kernels.softmax import row_max

LOGITS_PAD, PROBS_PAD = -np.inf, 0.0
MAX_BINS = 1_000_000


def _checked_labels(name: str, labels, sm) -> tuple[np.ndarray, np.ndarray]:
    """Labels of the rows that can be scored; raises if one is outside [0, K)."""
    y, y_present = integer_column(labels)
    usable = y_present & sm.present
    bad = usable & ((y < 0) | (y >= sm.lengths))
    if bad.any():
        i = int(np.argmax(bad))
        raise ValueError(
            f"{name}: label {y[i]} is outside [0, {sm.lengths[i]}) for a row with "
            f"{sm.lengths[i]} classes (labels are 0-based class indices)"
        )
    return np.where(usable, y, 0), usable


def _same_lengths(name: str, a, b, what: str) -> None:
    both = a.present & b.present
    differ = both & (a.lengths != b.lengths)
    if differ.any():
        i = int(np.argmax(differ))
        raise ValueError(
            f"{name}: the first list has {a.lengths[i]} classes but {what} has "
            f"{b.lengths[i]} in the same row; both lists must have one entry per class"
        )


def lists_to_lists(kernel, pad):
    def udf(scores):
        sm = score_matrix(scores, pad)
        out = kernel(sm.values)
        return list_of_doubles(out, sm.lengths, ~sm.present | np.isnan(out[:, 0]))

    return udf


def lists_to_doubles(kernel, pad):
    def udf(scores):
        sm = score_matrix(scores, pad)
        return doubles(kernel(sm.values), ~sm.present)

    return udf


def _undefined_rows(values: np.ndarray) -> np.ndarray:
    """Rows with no defined prediction: NaN, +inf, or every class -inf."""
    return ~np.isfinite(row_max(values))


def lists_to_class(kernel, pad):
    def udf(scores):
        sm = score_matrix(scores, pad)
        return integers(kernel(sm.values), ~sm.present | _undefined_rows(sm.values))

    return udf


def correct_class(name, pad):
    def udf(scores, labels):
        sm = score_matrix(scores, pad)
        y, usable = _checked_labels(name, labels, sm)
        out = predicted_class(sm.values) == y
        return booleans(out, ~usable | _undefined_rows(sm.values))

    return udf


def lists_and_label_to_doubles(name, kernel, pad):
    def udf(scores, labels):
        sm = score_matrix(scores, pad)
        y, usable = _checked_labels(name, labels, sm)
        return doubles(kernel(sm.values, y), ~usable)

    return udf


def two_lists_to_doubles(name, kernel, pad, what):
    def udf(first, second):
        a, b = score_matrix(first, pad), score_matrix(second, 0.0)
        _same_lengths(name, a, b, what)
        k = max(a.values.shape[1], b.values.shape[1])
        return doubles(
            kernel(widen(a.values, k, pad), widen(b.values, k, 0.0)), ~(a.present & b.present)
        )

    return udf


def widen(mat: np.ndarray, k: int, pad: float) -> np.ndarray:
    """Pad columns up to k (rows of another list may be longer in the same batch)."""
    if mat.shape[1] == k:
        return mat
    return np.hstack([mat, np.full((len(mat), k - mat.shape[1]), pad)])


def binary_logit_matrix(scores):
    """[0, s]: the two-class logits of one log-odds score s (binary_scores.pair)."""
    s, present = float_column(scores)
    return pair("binary_logit", s), present


def binary_logit_loss(mat: np.ndarray, y: np.ndarray) -> np.ndarray:
    """log(1 + exp(-s)) for y = 1, log(1 + exp(s)) for y = 0, accurate for tiny losses
    (numpy.logaddexp uses log1p); +inf logit -> NaN as for any list of logits."""
    s = mat[:, 1]
    with np.errstate(invalid="ignore"):
        out = np.logaddexp(0.0, np.where(y == 1, -s, s))
    out[np.isnan(s) | np.isposinf(s)] = np.nan
    return out


def binary_prob_matrix(scores):
    """[1 - p, p] (binary_scores.pair); a p outside [0, 1] (or NaN) gives a NaN row."""
    p, present = float_column(scores)
    with np.errstate(invalid="ignore"):
        p = np.where((p >= 0.0) & (p <= 1.0), p, np.nan)
    return pair("binary_prob", p), present


def binary_and_label_to_doubles(name, to_matrix, kernel):
    def udf(scores, labels):
        mat, present = to_matrix(scores)
        y, y_present = integer_column(labels)
        bad = present & y_present & ((y < 0) | (y > 1))
        if bad.any():
            raise ValueError(
                f"{name}: label {y[np.argmax(bad)]} is not 0 or 1 "
                "(binary labels mark the positive class with 1)"
            )
        return doubles(kernel(mat, np.where(bad, 0, y)), ~(present & y_present))

    return udf


def confidence_to_bin(conf, bins):
    c, present = float_column(conf)
    b, b_present = integer_column(bins)
    if b_present.any() and ((b[b_present] < 1) | (b[b_present] > MAX_BINS)).any():
        raise ValueError(
            f"calibration_bin: bins must be a whole number in 1..{MAX_BINS}, "
            f"got {b[b_present].min() if (b[b_present] < 1).any() else b[b_present].max()}"
        )
    out = np.full(len(c), -1, np.int32)
    for count in np.unique(b[b_present]):
        rows = b_present & (b == count)
        out[rows] = calibration_bin(c[rows], int(count))
    return integers(out, ~(present & b_present) | (out < 0))


def doubles_to_doubles(kernel):
    """A kernel of one float64 array as a UDF of one DOUBLE column; NULL and NaN give NULL."""

    def udf(values):
        x, present = float_column(values)
        return doubles(kernel(x), ~present)

    return udf


def temperature_grid_udf(scores, labels, temperatures, kinds):
    """Cross-entropy at each temperature, for the rows a rollup evaluates; NULL otherwise.

    kinds: a scores_kind, 'logits' / 'binary_logit' or 'probs' / 'binary_prob' (probabilities
    are checked and their logs used as logits; binary scores arrive as two-class lists).
    A row is NULL when its scores are unusable, its label is NULL or outside [0, K), or its
    true class has probability 0 (the rollup's infinite-loss rows).
    """
    logits = single_array(kinds)[0].as_py() in ("logits", "binary_logit")
    sm = score_matrix(scores, LOGITS_PAD if logits else PROBS_PAD)
    z = sm.values
    if not logits:
        with np.errstate(divide="ignore"):
            z = np.log(as_distribution(z))
    y, y_present = integer_column(labels)
    usable = sm.present & y_present & (y >= 0) & (y < sm.lengths)
    t, _ = float_column(single_array(temperatures)[0].values)
    if not len(t) or not (np.isfinite(t) & (t > 0)).all():
        raise ValueError("temperature_scaled_losses: temperatures must be positive numbers")
    losses = temperature_scaled_losses(z, np.where(usable, y, 0), t)
    usable &= np.isfinite(losses).all(axis=1)
    return list_of_doubles(losses, np.full(len(z), len(t)), ~usable)


ROW_STATS_TYPE = pa.struct(
    [
        ("score_issue", pa.int8()),
        ("label_issue", pa.int8()),
        ("classes", pa.int32()),
        ("loss", pa.float64()),
        ("confidence", pa.float64()),
        ("predicted", pa.int32()),
        ("correct", pa.bool_()),
        ("brier", pa.float64()),
        ("entropy", pa.float64()),
        ("bin", pa.int32()),
    ]
)


def row_stats_struct(st: RowStats) -> pa.StructArray:
    unscored = ~st.scored
    unlabelled = ~st.labelled
    fields = [
        pa.array(st.score_issue, pa.int8()),
        pa.array(st.label_issue, pa.int8()),
        integers(st.classes, st.classes == 0),
        doubles(st.loss),
        doubles(st.confidence),
        integers(st.predicted, unscored),
        booleans(np.nan_to_num(st.correct), unlabelled),
        doubles(st.brier),
        doubles(st.entropy),
        integers(st.bin, st.bin < 0),
    ]
    return pa.StructArray.from_arrays(fields, fields=list(ROW_STATS_TYPE))


def row_stats_udf(kernel, pad):
    def udf(scores, labels, bins):
        sm = score_matrix(scores, pad, dtype=None)  # the kernel converts once, transposing
        y, y_present = integer_column(labels)
        b, b_present = integer_column(bins)
        given = b[b_present]  # one constant per query: min and max, not a sort per call
        if not len(given) or given.min() != given.max() or not 1 <= given[0] <= MAX_BINS:
            seen = sorted({int(given.min()), int(given.max())}) if len(given) else "NULL"
            raise ValueError(
                f"row statistics: bins must be one whole number in 1..{MAX_BINS} "
                f"for the whole query, got {seen}"
            )
        count = int(given[0])
        return row_stats_struct(kernel(sm.values, sm.present, sm.lengths, y, y_present, count))

    return udf
