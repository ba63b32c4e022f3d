"""Tail probabilities for tests on the saved queries' sums (version comparisons).

normal_sf(z) = P(Z > z) for a standard normal Z = erfc(z / sqrt 2) / 2 (the same expression
as scipy.special.ndtr(-z)). Two-sided p of a z statistic: 2 normal_sf(|z|); the chi-square
survival function with one degree of freedom: chi2.sf(x, 1) = 2 normal_sf(sqrt x).
NaN stays NaN (NULL in SQL); +inf gives 0, -inf gives 1.
"""

import math

import numpy as np

Z95 = 1.959963984540054  # the 97.5% standard normal quantile: 95% two-sided intervals


def normal_sf(z: np.ndarray) -> np.ndarray:
    """Upper tail of the standard normal, elementwise.

    >>> normal_sf(np.array([0.0, Z95, -np.inf])).round(6).tolist()
    [0.5, 0.025, 1.0]
    """
    z = np.asarray(z, dtype=np.float64)
    out = np.array([0.5 * math.erfc(v / math.sqrt(2.0)) for v in z.ravel()], np.float64)
    return out.reshape(z.shape)
