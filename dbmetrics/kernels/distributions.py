"""Checks and information measures on probability rows (n, K), natural log (nats).

    H(p)        = -sum_j p_j log p_j                      (0 log 0 = 0)
    KL(p || q)  =  sum_j p_j log(p_j / q_j)               (+inf where q_j = 0 < p_j)
    JS(p, q)    =  KL(p || m)/2 + KL(q || m)/2, m = (p + q)/2   (0 <= JS <= log 2)
    PSI(a, e)   =  sum_j (a_j - e_j) log(a_j / e_j) = KL(a||e) + KL(e||a)

Inputs are first checked with `as_distribution`: a row with NaN/inf, a negative entry,
or a sum further than SUM_TOLERANCE from 1 is not a distribution and gives NaN;
rows within tolerance are renormalised to sum exactly 1.
"""

import numpy as np

SUM_TOLERANCE = 1e-3
LN2 = float(np.log(2.0))


def as_distribution(p: np.ndarray, tolerance: float = SUM_TOLERANCE) -> np.ndarray:
    """Rows renormalised to sum 1; NaN rows where p is not a distribution.

    >>> as_distribution(np.array([[0.2, 0.8], [0.5, 0.6]])).tolist()
    [[0.2, 0.8], [nan, nan]]
    """
    total = p.sum(axis=1)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(total) & (np.abs(total - 1.0) <= tolerance) & ~(p < 0).any(axis=1)
        out = p / np.where(ok, total, np.nan)[:, None]
    return out


def normalised(counts: np.ndarray) -> np.ndarray:
    """Rows of non-negative counts or weights scaled to sum 1; NaN rows if invalid or all zero."""
    total = counts @ np.ones(counts.shape[1])
    with np.errstate(invalid="ignore", divide="ignore"):
        ok = np.isfinite(total) & (total > 0) & ~(counts < 0).any(axis=1)
        return counts / np.where(ok, total, np.nan)[:, None]


def _xlogy_ratio(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Elementwise p log(p/q) with 0 where p = 0 (q >= 0), +inf where q = 0 < p.

    Same convention as scipy.special.rel_entr; log p - log q cannot overflow as p/q can
    when q is subnormal.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = p * (np.log(p) - np.log(q))
    terms[p == 0] = 0.0
    return terms


def entropy(p: np.ndarray) -> np.ndarray:
    """Shannon entropy per row (nats), 0 log 0 = 0; NaN rows stay NaN.

    >>> round(float(entropy(np.array([[0.36, 0.48, 0.16]]))[0]), 12)
    1.01331268735
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        terms = p * np.log(p)
    terms[p == 0] = 0.0
    return 0.0 - terms.sum(axis=1)  # +0.0, not -0.0, for a certain outcome


def kl_divergence(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """KL(p || q) per row (nats); +inf where q = 0 < p.

    >>> round(float(kl_divergence(np.array([[.36, .48, .16]]), np.full((1, 3), 1/3))[0]), 7)
    0.0852996
    """
    return clipped(_xlogy_ratio(p, q).sum(axis=1))


def js_divergence(p: np.ndarray, q: np.ndarray) -> np.ndarray:
    """Jensen-Shannon divergence per row (nats), in [0, log 2], never infinite.

    Each term p log(p / m) is taken as p (log p - log(p + q) + log 2): m = (p + q)/2 would
    underflow to 0 for a subnormal q and turn a finite divergence into +inf.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        log_sum = np.log(p + q)
        tp = p * (np.log(p) - log_sum + LN2)
        tq = q * (np.log(q) - log_sum + LN2)
    tp[p == 0] = 0.0
    tq[q == 0] = 0.0
    return clipped(0.5 * tp.sum(axis=1) + 0.5 * tq.sum(axis=1), LN2)


def population_stability_index(actual: np.ndarray, expected: np.ndarray) -> np.ndarray:
    """PSI per row over bin proportions: sum (a - e) log(a / e); +inf if a bin is empty in one only.

    No smoothing here; callers that compare sparse histograms smooth the counts first.
    """
    return clipped(
        _xlogy_ratio(actual, expected).sum(axis=1) + _xlogy_ratio(expected, actual).sum(axis=1)
    )


def clipped(d: np.ndarray, high: float = np.inf) -> np.ndarray:
    """A divergence kept within its mathematical range; rounding of nearly equal rows can
    otherwise give -1e-17 (NaN rows stay NaN)."""
    return np.clip(d, 0.0, high)
