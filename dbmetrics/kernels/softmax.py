"""Stable softmax family over the last axis of an (n, K) float64 array.

    logsumexp(z)   = m + log(sum_j exp(z_j - m)),  m = max_j z_j
    log_softmax(z) = z - logsumexp(z)
    softmax(z)     = exp(log_softmax(z))

Conventions: a -inf logit is a masked class (probability 0, log-probability -inf).
A row with NaN or +inf, or whose classes are all masked, is undefined: NaN.
"""

import numpy as np

SHORT_AXIS = 32


def row_max(z: np.ndarray) -> np.ndarray:
    """Row maxima, NaN-propagating (K >= 1).

    numpy reduces a short last axis slowly; a loop over the K columns gives the
    same values several times faster when K is small.
    """
    if z.shape[1] > SHORT_AXIS:
        return z.max(axis=1)
    m = z[:, 0].copy()
    for j in range(1, z.shape[1]):
        np.maximum(m, z[:, j], out=m)
    return m


def class_sum(e: np.ndarray, axis: int) -> np.ndarray:
    """Sum over the classes (`axis`), with exactly the additions, in exactly the order, of
    numpy's pairwise sum along a contiguous row (so of e.sum(axis=1) on an (n, K) array and
    of scipy.special.log_softmax), but done a whole class at a time: much faster for short
    rows, and the same bits whatever the layout. K > 128 falls back to numpy's own sum.
    """
    k = e.shape[axis]
    if k > 128:
        return np.ascontiguousarray(np.moveaxis(e, axis, -1)).sum(axis=-1)
    col = (lambda j: e[:, j]) if axis == 1 else (lambda j: e[j])
    if k < 8:
        total = np.zeros(e.shape[1 - axis])
        for j in range(k):
            total += col(j)
        return total
    lanes = [col(j).copy() for j in range(8)]
    full = k - k % 8
    for start in range(8, full, 8):
        for j in range(8):
            lanes[j] += col(start + j)
    total = ((lanes[0] + lanes[1]) + (lanes[2] + lanes[3])) + (
        (lanes[4] + lanes[5]) + (lanes[6] + lanes[7])
    )
    for j in range(full, k):
        total += col(j)
    return total


def row_argmax(z: np.ndarray) -> np.ndarray:
    """0-based index of the first row maximum (ties go to the lowest class), int32."""
    if z.shape[1] > SHORT_AXIS:
        return z.argmax(axis=1).astype(np.int32)
    best = z[:, 0].copy()
    idx = np.zeros(len(z), np.int32)
    for j in range(1, z.shape[1]):
        col = z[:, j]
        idx[col > best] = j
        np.maximum(best, col, out=best)
    return idx


def shifted(z: np.ndarray):
    """(d, e, s, m, ok) with m = row max, d = z - m <= 0, e = exp(d), s = sum(e) >= 1 and
    ok = row defined.

    The operations and their order are scipy.special.log_softmax's (exp of the shifted
    row, numpy sum along the row, log), so results agree with it to the bit. Like it, a
    loss near 0 carries an absolute error of about 1e-16 (log(1 + x) for x < 1e-7).
    Undefined rows (m not finite) are shifted by 0 and must be masked by the caller.
    """
    m = row_max(z)
    ok = np.isfinite(m)
    m = np.where(ok, m, 0.0)
    with np.errstate(invalid="ignore", over="ignore"):
        d = z - m[:, None]
        e = np.exp(d)
        s = class_sum(e, axis=1)
    return d, e, s, m, ok


def logsumexp(z: np.ndarray) -> np.ndarray:
    """log(sum(exp(z))) per row; NaN for undefined rows.

    >>> float(logsumexp(np.array([[1.0, 2.0, 3.0]]))[0])
    3.4076059644443806
    """
    _, _, s, m, ok = shifted(z)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.log(s) + m
    out[~ok] = np.nan
    return out


def log_softmax(z: np.ndarray) -> np.ndarray:
    """Log-probabilities per row; masked classes give -inf, undefined rows NaN.

    >>> log_softmax(np.array([[1e4, -1e4, 0.0]])).tolist()
    [[0.0, -20000.0, -10000.0]]
    """
    d, _, s, _, ok = shifted(z)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = d - np.log(s)[:, None]
    out[~ok] = np.nan
    return out


def softmax(z: np.ndarray) -> np.ndarray:
    """Probabilities per row (sum 1); masked classes give 0, undefined rows NaN.

    >>> softmax(np.array([[0.0, -np.inf, 0.0]])).tolist()
    [[0.5, 0.0, 0.5]]
    """
    _, e, s, _, ok = shifted(z)
    with np.errstate(invalid="ignore", over="ignore"):
        out = e / s[:, None]
    out[~ok] = np.nan
    return out
