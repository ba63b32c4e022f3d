"""Everything a rollup needs from one row, computed once per row.

For each row: score_issue, label_issue, loss (cross-entropy of the true class),
confidence, predicted class, correct, Brier (multi-class sum), entropy of the
prediction, calibration bin. Codes:

    score_issue  0 ok | 1 missing (NULL/empty) | 2 invalid (NaN, +inf logit, all masked)
                 3 not a distribution (probabilities only)
    label_issue  0 ok | 1 unlabelled (NULL) | 2 out of range [0, K)

Numeric fields are NaN where score_issue != 0; loss/correct/brier are NaN where
label_issue != 0. A true class of probability 0 gives loss = +inf.

The work is done on the transposed (K, n) block: numpy reduces along the first
axis of a contiguous array many times faster than along a short last axis.
"""

from dataclasses import dataclass

import numpy as np

from .distributions import SUM_TOLERANCE
from .predictions import calibration_bin
from .softmax import SHORT_AXIS, class_sum

MISSING, INVALID, NOT_A_DISTRIBUTION = 1, 2, 3
UNLABELLED, LABEL_OUT_OF_RANGE = 1, 2


@dataclass
class RowStats:
    score_issue: np.ndarray
    label_issue: np.ndarray
    classes: np.ndarray
    loss: np.ndarray
    confidence: np.ndarray
    predicted: np.ndarray
    correct: np.ndarray
    brier: np.ndarray
    entropy: np.ndarray
    bin: np.ndarray

    @property
    def scored(self) -> np.ndarray:
        return self.score_issue == 0

    @property
    def labelled(self) -> np.ndarray:
        return self.scored & (self.label_issue == 0)


def _label_issues(y: np.ndarray, y_present: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """0 ok, 1 NULL label, 2 label outside [0, K_row) (only judged where K_row is known)."""
    issue = np.zeros(len(y), np.int8)
    issue[(lengths > 0) & ((y < 0) | (y >= lengths))] = LABEL_OUT_OF_RANGE
    issue[~y_present] = UNLABELLED
    return issue


def transposed(values: np.ndarray) -> np.ndarray:
    """A (K, n) float64 copy of an (n, K) block, laid out so that reductions over the K
    classes run along memory: class-major for small K, row-major (a transposed view of
    the copy) for large K, where each row is long enough on its own."""
    if values.shape[1] > SHORT_AXIS:
        return values.astype(np.float64).T
    return np.array(values.T, dtype=np.float64, order="C")


def _first_argmax(t: np.ndarray, top) -> np.ndarray:
    """Index of the first entry equal to the column maximum `top` in a (K, n) block."""
    if t.shape[0] > SHORT_AXIS:
        return t.argmax(axis=0).astype(np.int32)
    idx = np.zeros(t.shape[1], np.int32)
    for j in range(t.shape[0] - 1, 0, -1):
        idx = np.where(t[j] == top, np.int32(j), idx)
    return np.where(t[0] == top, np.int32(0), idx)


def _brier_and_correct(pt, y, labelled, pred):
    """sum_j (p_j - [j = y])^2 computed directly, and pred == y; pt is modified."""
    cols = np.arange(pt.shape[1])
    y_safe = np.where(labelled, y, 0)
    pt[y_safe, cols] -= 1.0
    brier = np.einsum("ij,ij->j", pt, pt)
    return brier, pred == y_safe


def assemble(score_issue, y, y_present, lengths, pt, conf, pred, loss, entropy, bins) -> RowStats:
    """Shared tail: label checks, Brier, correctness, bins, NaN-masking of unusable rows."""
    scored = score_issue == 0
    label_issue = _label_issues(y, y_present, lengths)
    labelled = scored & (label_issue == 0)
    brier, correct = _brier_and_correct(pt, y, labelled, pred)
    correct = correct.astype(np.float64)
    if not labelled.all():
        for a in (loss, brier, correct):
            a[~labelled] = np.nan
    if not scored.all():
        for a in (conf, entropy):
            a[~scored] = np.nan
    return RowStats(
        score_issue,
        label_issue,
        lengths.astype(np.int32),
        loss,
        conf,
        pred,
        correct,
        brier,
        entropy,
        calibration_bin(conf, bins),
    )


def logit_row_stats(z, present, lengths, y, y_present, bins) -> RowStats:
    """Row statistics from logits z (n, K); rows not `present` are missing; padding is -inf.

    loss = log s - d_y, confidence = 1/s, entropy = log s - sum_j p_j d_j, with
    d = z - max(z) <= 0, s = sum_j exp(d_j) >= 1, p = exp(d)/s (no cancellation).
    """
    zt = transposed(z)
    m = zt.max(axis=0)
    ok = np.isfinite(m)
    score_issue = np.where(present, np.where(ok, 0, INVALID), MISSING).astype(np.int8)
    if not ok.all():
        m[~ok] = 0.0
    cols = np.arange(zt.shape[1])
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        zt -= m
        top = _first_argmax(zt, 0.0)
        pt = np.exp(zt)
        s = class_sum(pt, axis=0)  # the additions of scipy's log_softmax, bit for bit
        log_s = np.log(s)
        pt /= s
        loss = log_s - zt[np.clip(y, 0, zt.shape[0] - 1), cols]
        pd = np.einsum("ij,ij->j", pt, zt)
        conf = 1.0 / s
        masked = np.isnan(pd) & ok
        if masked.any():
            pm, dm = pt[:, masked], zt[:, masked]
            pd[masked] = np.where(pm > 0, pm * dm, 0.0).sum(axis=0)
    return assemble(score_issue, y, y_present, lengths, pt, conf, top, loss, log_s - pd, bins)


def prob_row_stats(p, present, lengths, y, y_present, bins) -> RowStats:
    """Row statistics from probabilities (n, K); padding is 0; rows are checked and renormalised.

    A row with NaN/inf is invalid; a negative entry or a sum further than 1e-3 from 1
    is not a distribution. loss = -log p_y, confidence = max p, entropy = -sum p log p.
    """
    pt = transposed(p)
    total = p.sum(axis=1, dtype=np.float64)  # the same additions as as_distribution
    finite = np.isfinite(total)
    with np.errstate(invalid="ignore"):
        is_dist = finite & (np.abs(total - 1.0) <= SUM_TOLERANCE) & (pt.min(axis=0) >= 0)
    score_issue = np.where(
        present, np.where(finite, np.where(is_dist, 0, NOT_A_DISTRIBUTION), INVALID), MISSING
    ).astype(np.int8)
    with np.errstate(invalid="ignore", divide="ignore"):
        pt /= np.where(is_dist, total, np.nan)
        logp = np.log(pt)
        cols = np.arange(pt.shape[1])
        loss = 0.0 - logp[np.clip(y, 0, pt.shape[0] - 1), cols]
        entropy = 0.0 - np.einsum("ij,ij->j", pt, np.where(pt > 0, logp, 0.0))
        conf = pt.max(axis=0)
    return assemble(
        score_issue, y, y_present, lengths, pt, conf, _first_argmax(pt, conf), loss, entropy, bins
    )
