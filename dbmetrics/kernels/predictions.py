"""Per-row prediction summaries from probability rows (n, K).

predicted class = first argmax_j p_j (0-based; ties go to the lowest index)
confidence      = max_j p_j
margin          = top-1 minus top-2 probability (1 when K = 1)
calibration bin = m (0-based) with edge_m < c <= edge_{m+1}, edges = linspace(0, 1, B + 1);
                  c = 0 falls in bin 0; c outside [0, 1] or NaN -> -1 (NULL in SQL).
                  Identical to sklearn.calibration.calibration_curve's binning.
"""

import numpy as np

from .softmax import row_argmax, row_max


def confidence(p: np.ndarray) -> np.ndarray:
    """Largest probability per row."""
    return row_max(p)


def predicted_class(scores: np.ndarray) -> np.ndarray:
    """First argmax per row (logits and probabilities give the same class)."""
    return row_argmax(scores)


def margin(p: np.ndarray) -> np.ndarray:
    """Top-1 minus top-2 probability per row (1.0 for a single class).

    >>> margin(np.array([[0.2, 0.5, 0.3]])).tolist()
    [0.2]
    """
    if p.shape[1] == 1:
        return np.where(np.isnan(p[:, 0]), np.nan, 1.0)
    top2 = np.partition(p, p.shape[1] - 2, axis=1)[:, -2:]
    return top2[:, 1] - top2[:, 0]


def calibration_bin(conf: np.ndarray, bins: int) -> np.ndarray:
    """Right-closed equal-width bin of each confidence, -1 when out of [0, 1].

    ceil(c * B) - 1 is the bin up to one step of rounding; a comparison with the
    linspace edges settles it, exactly as searchsorted(inner edges, side='left') would.

    >>> calibration_bin(np.array([0.0, 0.1, 0.5, 0.55, 0.7, 1.0]), 10).tolist()
    [0, 0, 4, 5, 6, 9]
    """
    if bins < 1:
        raise ValueError(f"calibration_bin: bins must be a positive integer, got {bins}")
    edges = np.linspace(0.0, 1.0, bins + 1)
    with np.errstate(invalid="ignore"):
        inside = (conf >= 0.0) & (conf <= 1.0)
        c = np.where(inside, conf, 0.0)
    guess = np.clip(np.ceil(c * bins).astype(np.int32) - 1, 0, bins - 1)
    guess -= ((c <= edges[guess]) & (guess > 0)).astype(np.int32)
    guess += ((c > edges[guess + 1]) & (guess < bins - 1)).astype(np.int32)
    guess[~inside] = -1
    return guess
