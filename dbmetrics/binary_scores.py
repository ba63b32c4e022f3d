"""One score per row read as the two classes' scores: the one home of the binary wrappers.

    binary_logit  s -> [0, s]       s the log-odds of class 1 (softmax([0, s])_1 = 1/(1 + e^-s))
    binary_prob   p -> [1 - p, p]   p the probability of class 1

Every route reads a `binary_*` log through these pairs: `pair_sql` writes one as a DuckDB
list (the `predictions` rows of the saved queries, the health check), `pair` as a float64
matrix (the binary SQL functions). A NaN or infinite score stays as it is in its pair (the
row-statistics and loss kernels judge it); `[0, -inf]` is a defined row (p1 = 0).
The SQL macro pack writes the same pairs for clients without Python
(`dbmetrics_binary_logit_scores`, `dbmetrics_binary_prob_scores`).

>>> pair_sql("binary_prob", "x")
'[1.0 - x, x]'
>>> pair("binary_logit", np.array([2.0, -np.inf])).tolist()
[[0.0, 2.0], [0.0, -inf]]
"""

import numpy as np

# scores_kind -> (the pair as SQL with {s} for the score, the pair's two columns in numpy)
_PAIRS = {
    "binary_logit": ("[0.0, {s}]", lambda s: (np.zeros_like(s), s)),
    "binary_prob": ("[1.0 - {s}, {s}]", lambda p: (1.0 - p, p)),
}
BINARY_KINDS = tuple(_PAIRS)


def is_binary(kind: str) -> bool:
    """Whether scores_kind `kind` holds one score per row."""
    return kind in _PAIRS


def pair_sql(kind: str, expr: str) -> str:
    """The DuckDB list of the two classes' scores of the score expression `expr`."""
    return _PAIRS[kind][0].format(s=expr)


def pair(kind: str, scores: np.ndarray) -> np.ndarray:
    """The rows x 2 float64 matrix of the two classes' scores of a float64 vector."""
    return np.column_stack(_PAIRS[kind][1](np.asarray(scores, dtype=np.float64)))
