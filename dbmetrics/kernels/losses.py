"""Cross-entropy and Brier score per row, natural log (nats).

    cross-entropy (hard label y)  = -log p_y = logsumexp(z) - z_y
    cross-entropy (soft target t) = -sum_j t_j log p_j          (0 log 0 = 0)
    Brier (multi-class)           = sum_j (p_j - [j = y])^2     (range [0, 2]; Brier 1950)

A true class with probability 0 (a -inf logit, or a probability of exactly 0) gives +inf.
Labels must already be validated 0 <= y < K; rows the math leaves undefined give NaN.
"""

import numpy as np

from .distributions import as_distribution
from .softmax import log_softmax, shifted


def pick(a: np.ndarray, y: np.ndarray) -> np.ndarray:
    """a[i, y_i] for every row."""
    return a[np.arange(len(a)), y]


def cross_entropy_logits(z: np.ndarray, y: np.ndarray) -> np.ndarray:
    """-log softmax(z)_y per row.

    >>> cross_entropy_logits(np.array([[1e4, -1e4, 0.0]] * 3), np.array([0, 1, 2])).tolist()
    [0.0, 20000.0, 10000.0]
    """
    d, _, s, _, ok = shifted(z)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.log(s) - pick(d, y)
    out[~ok] = np.nan
    return out


def cross_entropy_probs(p: np.ndarray, y: np.ndarray) -> np.ndarray:
    """-log p_y per row of checked, renormalised probabilities."""
    with np.errstate(divide="ignore"):
        return 0.0 - np.log(pick(as_distribution(p), y))


def _soft_cross_entropy_log(logp: np.ndarray, t: np.ndarray) -> np.ndarray:
    """-sum_j t_j log p_j given log-probabilities; t is checked and renormalised."""
    t = as_distribution(t)
    with np.errstate(invalid="ignore"):
        terms = t * logp
    terms[t == 0] = 0.0
    return 0.0 - terms.sum(axis=1)


def soft_cross_entropy_logits(z: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Cross-entropy of softmax(z) against a target distribution t."""
    return _soft_cross_entropy_log(log_softmax(z), t)


def soft_cross_entropy_probs(p: np.ndarray, t: np.ndarray) -> np.ndarray:
    """Cross-entropy of probabilities p against a target distribution t."""
    with np.errstate(divide="ignore"):
        return _soft_cross_entropy_log(np.log(as_distribution(p)), t)


def brier_score(p: np.ndarray, y: np.ndarray) -> np.ndarray:
    """sum_j (p_j - onehot(y)_j)^2 per row, computed directly (no cancellation).

    >>> brier_score(np.array([[.2, .7, .1], [.6, .3, .1], [.1, .1, .8]]), np.array([1, 0, 0])).mean().round(12)
    np.float64(0.62)
    """
    diff = p.copy()
    diff[np.arange(len(p)), y] -= 1.0
    return np.einsum("ij,ij->i", diff, diff)


def temperature_scaled_losses(z: np.ndarray, y: np.ndarray, temperatures: np.ndarray) -> np.ndarray:
    """(n, T) cross-entropies of softmax(z / t) for each temperature t (Guo et al. 2017).

    t > 1 softens an over-confident model, t < 1 sharpens an under-confident one; t = 1 is
    the model as logged. Row conventions as cross_entropy_logits.
    """
    return np.column_stack([cross_entropy_logits(z / t, y) for t in temperatures])
