"""Everything a rollup needs from one row, computed once per row.

For each row: score_issue, label_issue, loss (cross-entropy of the true class),
confidence, predicted class, correct, Brier (multi-class sum), entropy of the
prediction, calibration bin. Codes:

    score_issue  0 ok | 1 missing (NULL/empty) | 2 invalid (NaN, +inf logit, all masked)
                 3 not a distribution (probabilities only)
    label_issue  0 ok | 1 unlabelled (NULL) | 2 out of range [0, K)

Numeric fields are NaN where score_issue != 0; loss/correct/brier are NaN where
label_issue != 0. A true class of probability 0 gives loss = +inf.
"""

from dataclasses import dataclass

import numpy as np

from .distributions import as_distribution
from .losses import brier_score, pick
from .predictions import calibration_bin
from .softmax import row_argmax, row_max, shifted

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


def label_issues(y: np.ndarray, y_present: np.ndarray, lengths: np.ndarray) -> np.ndarray:
    """0 ok, 1 NULL label, 2 label outside [0, K_row) (only judged where K_row is known)."""
    issue = np.zeros(len(y), np.int8)
    issue[(lengths > 0) & ((y < 0) | (y >= lengths))] = LABEL_OUT_OF_RANGE
    issue[~y_present] = UNLABELLED
    return issue


def entropy_from_shift(p: np.ndarray, d: np.ndarray, s: np.ndarray) -> np.ndarray:
    """H = log s - sum_j p_j d_j with d = z - max z <= 0: two non-negative terms, no cancellation."""
    with np.errstate(invalid="ignore"):
        pd = np.einsum("ij,ij->i", p, d)
    masked_rows = np.isnan(pd)
    if masked_rows.any():
        pm, dm = p[masked_rows], d[masked_rows]
        pd[masked_rows] = np.where(pm > 0, pm * np.where(np.isfinite(dm), dm, 0.0), 0.0).sum(axis=1)
    return np.log(s) - pd


def finish(score_issue, y, y_present, lengths, p, conf, pred, loss, entropy, bins) -> RowStats:
    """Shared tail: label checks, correctness, Brier, bins, and NaN-masking of unusable rows."""
    scored = score_issue == 0
    label_issue = label_issues(y, y_present, lengths)
    labelled = scored & (label_issue == 0)
    y_safe = np.where(labelled, y, 0)
    brier = np.full(len(y), np.nan)
    if labelled.any():
        brier[labelled] = brier_score(p[labelled], y_safe[labelled])
    correct = np.where(labelled, pred == y_safe, np.nan)
    loss = np.where(labelled, loss, np.nan)
    conf = np.where(scored, conf, np.nan)
    return RowStats(
        score_issue=score_issue, label_issue=label_issue, classes=lengths.astype(np.int32),
        loss=loss, confidence=conf, predicted=pred, correct=correct, brier=brier,
        entropy=np.where(scored, entropy, np.nan), bin=calibration_bin(conf, bins),
    )


def logit_row_stats(z, present, lengths, y, y_present, bins) -> RowStats:
    """Row statistics from logits z (n, K); rows not `present` are missing; padding is -inf."""
    d, s, _, ok = shifted(z)
    score_issue = np.where(present, np.where(ok, 0, INVALID), MISSING).astype(np.int8)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        p = np.exp(d) / s[:, None]
        loss = np.log(s) - pick(d, np.clip(y, 0, z.shape[1] - 1))
        entropy = entropy_from_shift(p, d, s)
    return finish(score_issue, y, y_present, lengths, p, 1.0 / s, row_argmax(z),
                  loss, entropy, bins)


def prob_row_stats(p_raw, present, lengths, y, y_present, bins) -> RowStats:
    """Row statistics from probabilities (n, K); padding is 0; rows are checked and renormalised."""
    with np.errstate(invalid="ignore"):
        finite = np.isfinite(p_raw @ np.ones(p_raw.shape[1]))
    p = as_distribution(p_raw)
    is_dist = np.isfinite(p[:, 0]) if p.shape[1] else finite
    score_issue = np.where(present, np.where(finite, np.where(is_dist, 0, NOT_A_DISTRIBUTION),
                                                      INVALID), MISSING).astype(np.int8)
    with np.errstate(invalid="ignore", divide="ignore"):
        logp = np.log(p)
        loss = -pick(logp, np.clip(y, 0, p.shape[1] - 1))
        entropy = -np.einsum("ij,ij->i", p, np.where(p > 0, logp, 0.0))
    return finish(score_issue, y, y_present, lengths, p, row_max(p), row_argmax(p),
                  loss, entropy, bins)
