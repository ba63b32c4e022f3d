"""The per-class additive states: what the per-class, confusion and binary views sum.

Every state is one row per day x version x segments x its own keys, over *evaluated* rows
(scored, label in [0, K), finite loss: the rows the rollup's accuracy counts), except the
first five CLASS_STATE columns, which keep their meaning over scored rows:

CLASS_STATE (key class), added columns:
    support_rows              evaluated rows labelled with the class
    predicted_evaluated_rows  evaluated rows whose predicted class (first maximum) is the class
    true_positive_rows        evaluated rows labelled with and predicted as the class
    sum_class_loss            sum of -log p(label) over evaluated rows labelled with the class
    sum_prob_evaluated        sum of p(class) over all evaluated rows
    top3_rows, top5_rows      evaluated rows labelled with the class whose label is among the
                              3 (5) most probable classes
CLASS_BIN_STATE (keys class, bin): for each evaluated row and each of its classes c, the
    equal-width bin of p(c) (bins right-closed, 0 in bin 0, as calibration_bin): rows,
    label_rows (rows labelled c), sum_prob (sum of p(c)) -- the class-wise reliability data
CONFUSION_STATE (keys label, predicted): rows
BINARY_STATE (key score_bin; evaluated rows with exactly two classes only): positives
    (label 1), negatives (label 0), sum_prob (sum of p(class 1)), sum_brier (sum of
    (p(class 1) - label)^2), in SCORE_BINS equal-width bins of the log-odds
    s = log p1 - log p0 (z1 - z0 for logits) clipped to [-SCORE_LIMIT, SCORE_LIMIT].

The rank of the label (for top-k) is the number of classes with a larger probability plus
those with an equal one and a lower index: ties go to the lowest index, as argmax does, so
top-1 is exactly the accuracy.

`batch_sums` computes every state of one batch in numpy for the engine; the *_sql functions
are the same sums in SQL over the per-row statistics (the UDF route); tests hold them equal.
"""

import numpy as np
import pyarrow as pa

from dbmetrics.arrow_lists import integer_column
from dbmetrics.kernels.predictions import calibration_bin

from .roles import KINDS, ColumnRoles

SCORE_BINS = 4096
SCORE_LIMIT = 16.0
SCORE_SCALE = SCORE_BINS / (2 * SCORE_LIMIT)  # bins per unit of log-odds: 128
TOP_K = (3, 5)

# state kind -> (its own key columns, its additive columns); counts are BIGINT, sum_* DOUBLE
CLASS_COLUMNS_ADDED = (
    "support_rows",
    "predicted_evaluated_rows",
    "true_positive_rows",
    "sum_class_loss",
    "sum_prob_evaluated",
    *(f"top{k}_rows" for k in TOP_K),
)
EXTRA_STATES = {
    "class_bin_state": (("class", "bin"), ("rows", "label_rows", "sum_prob")),
    "confusion_state": (("label", "predicted"), ("rows",)),
    "binary_state": (("score_bin",), ("positives", "negatives", "sum_prob", "sum_brier")),
}


def _state_columns(kind: str) -> tuple:
    """("day", keys..., additive columns...) of an extra state kind."""
    keys, sums = EXTRA_STATES[kind]
    return ("day", *keys, *sums)


def score_bin(s: np.ndarray) -> np.ndarray:
    """Bin of each log-odds s: floor((clip(s, -L, L) + L) * SCORE_SCALE), the top edge in the
    last bin; infinite s goes to an end bin.

    >>> score_bin(np.array([-np.inf, -16.0, 0.0, 1 / 128, 15.999, 16.0, np.inf])).tolist()
    [0, 0, 2048, 2049, 4095, 4095, 4095]
    """
    clipped = np.clip(s, -SCORE_LIMIT, SCORE_LIMIT)
    return np.minimum(np.floor((clipped + SCORE_LIMIT) * SCORE_SCALE), SCORE_BINS - 1).astype(
        np.int64
    )


def label_rank(p: np.ndarray, y: np.ndarray) -> np.ndarray:
    """0-based rank of the label in each row of probabilities p (n, K), ties to the lowest
    index: #{j: p_j > p_y} + #{j < y: p_j = p_y}.

    >>> label_rank(np.array([[0.2, 0.5, 0.3], [0.4, 0.2, 0.4]]), np.array([2, 2])).tolist()
    [1, 1]
    """
    py = p[np.arange(len(y)), y][:, None]
    lower = np.arange(p.shape[1])[None, :] < y[:, None]
    return (p > py).sum(axis=1) + ((p == py) & lower).sum(axis=1)


def _sparse_sums(codes: np.ndarray, weights: dict, size: int) -> tuple:
    """(distinct codes, {name: sum of weights per code}, counts): np.bincount when the dense
    range is small, else over the distinct codes only (K x K or K x bins can be large)."""
    if size <= 4 * len(codes) + (1 << 16):
        counts = np.bincount(codes, minlength=size)
        used = np.flatnonzero(counts)
        sums = {n: np.bincount(codes, w, minlength=size)[used] for n, w in weights.items()}
        return used, sums, counts[used]
    used, inverse, counts = np.unique(codes, return_inverse=True, return_counts=True)
    sums = {n: np.bincount(inverse, w, minlength=len(used)) for n, w in weights.items()}
    return used, sums, counts


def batch_sums(batch, sm, st, p, rows, group, first_of_group, keys, kinds, bins, is_logits):
    """The extra states of one batch ({kind: pa.Table or None}) and the added CLASS_STATE
    columns per group x class ({column: (n_groups, k) array}).

    p: the scored rows' probabilities (n_scored, k), rows their positions in the batch, group
    their dense group number, first_of_group the batch position of each group's first row.
    """
    k = p.shape[1]
    n_groups = len(first_of_group)
    y_all, _ = integer_column(batch.column("label"))
    evaluated = (st.label_issue[rows] == 0) & np.isfinite(st.loss[rows])
    e = np.flatnonzero(evaluated)
    pe, ge, ye = p[e], group[e], y_all[rows][e]
    pred = st.predicted[rows][e].astype(np.int64)

    def keyed(g: np.ndarray) -> dict:
        take = pa.array(first_of_group[g])
        return {name: batch.column(name).take(take) for name in ["day", *keys]}

    added = {}
    if "class_state" in kinds:
        size = n_groups * k
        label_code = ge * k + ye
        correct = pred == ye
        rank = label_rank(pe, ye)
        added = {
            "support_rows": np.bincount(label_code, minlength=size),
            "predicted_evaluated_rows": np.bincount(ge * k + pred, minlength=size),
            "true_positive_rows": np.bincount(label_code[correct], minlength=size),
            "sum_class_loss": np.bincount(label_code, st.loss[rows][e], minlength=size),
            "sum_prob_evaluated": _group_sums(pe, ge, n_groups).ravel(),
        }
        for top in TOP_K:
            added[f"top{top}_rows"] = np.bincount(label_code[rank < top], minlength=size)
        added = {name: a.reshape(n_groups, k) for name, a in added.items()}
    out = {}
    if "class_bin_state" in kinds:
        lengths = sm.lengths[rows][e]
        g, c = np.nonzero(np.arange(k)[None, :] < lengths[:, None])
        prob = pe[g, c]
        codes = (ge[g] * k + c) * bins + calibration_bin(prob, bins)
        used, sums, counts = _sparse_sums(
            codes,
            {"label_rows": (ye[g] == c).astype(np.float64), "sum_prob": prob},
            n_groups * k * bins,
        )
        cell, bin_ = np.divmod(used, bins)
        gg, cc = np.divmod(cell, k)
        out["class_bin_state"] = pa.table(
            {
                **keyed(gg),
                "class": pa.array(cc, pa.int64()),
                "bin": pa.array(bin_, pa.int64()),
                "rows": pa.array(counts, pa.int64()),
                "label_rows": pa.array(sums["label_rows"].astype(np.int64)),
                "sum_prob": pa.array(sums["sum_prob"]),
            }
        )
    if "confusion_state" in kinds:
        used, _, counts = _sparse_sums((ge * k + ye) * k + pred, {}, n_groups * k * k)
        cell, predicted = np.divmod(used, k)
        gg, label = np.divmod(cell, k)
        out["confusion_state"] = pa.table(
            {
                **keyed(gg),
                "label": pa.array(label, pa.int64()),
                "predicted": pa.array(predicted, pa.int64()),
                "rows": pa.array(counts, pa.int64()),
            }
        )
    if "binary_state" in kinds:
        two = np.flatnonzero(sm.lengths[rows][e] == 2)
        out["binary_state"] = (
            _binary_table(sm, rows, e, two, pe, ge, ye, n_groups, is_logits, keyed)
            if len(two)
            else None
        )
    return out, added


def _group_sums(values: np.ndarray, group: np.ndarray, n_groups: int) -> np.ndarray:
    """Column sums of `values` (n, k) per group number: (n_groups, k), 0 for empty groups."""
    out = np.zeros((n_groups, values.shape[1]))
    if len(group):
        order = np.argsort(group, kind="stable")
        starts = np.flatnonzero(np.r_[True, np.diff(group[order]) != 0])
        out[group[order[starts]]] = np.add.reduceat(values[order], starts, axis=0)
    return out


def _binary_table(sm, rows, e, two, pe, ge, ye, n_groups, is_logits, keyed) -> pa.Table:
    """BINARY_STATE rows of the evaluated two-class rows `two` (positions in e)."""
    if is_logits:
        z = sm.values[rows[e[two]]].astype(np.float64)
        s = z[:, 1] - z[:, 0]
    else:
        with np.errstate(divide="ignore"):
            s = np.log(pe[two, 1]) - np.log(pe[two, 0])
    y = ye[two]
    p1 = pe[two, 1]
    used, sums, _ = _sparse_sums(
        ge[two] * SCORE_BINS + score_bin(s),
        {
            "positives": (y == 1).astype(np.float64),
            "negatives": (y == 0).astype(np.float64),
            "sum_prob": p1,
            "sum_brier": (p1 - y) ** 2,
        },
        n_groups * SCORE_BINS,
    )
    gg, b = np.divmod(used, SCORE_BINS)
    return pa.table(
        {
            **keyed(gg),
            "score_bin": pa.array(b, pa.int64()),
            "positives": pa.array(sums["positives"].astype(np.int64)),
            "negatives": pa.array(sums["negatives"].astype(np.int64)),
            "sum_prob": pa.array(sums["sum_prob"]),
            "sum_brier": pa.array(sums["sum_brier"]),
        }
    )


# -- the same states in SQL, over the per-row statistics (the UDF route) ------------------


def evaluated_rows_sql(roles: ColumnRoles, source: str) -> str:
    """Evaluated rows of `source` (day, keys, scores, label, stats) with their distribution."""
    dist = KINDS[roles.kind][1]
    return (
        f"SELECT day, {roles.keys}, scores, label, stats.predicted AS predicted,\n"
        f"       stats.loss AS loss, {dist}(scores) AS dist\n"
        f"FROM {source}\n"
        f"WHERE stats.score_issue = 0 AND stats.label_issue = 0 AND isfinite(stats.loss)"
    )


LABEL_RANK_SQL = (
    "len(list_filter(range(len(dist)), lambda j: dist[j + 1] > dist[label + 1]"
    " OR (dist[j + 1] = dist[label + 1] AND j < label)))"
)


def _class_bin_sql(roles: ColumnRoles, evaluated: str) -> str:
    per_class = (
        f"SELECT day, {roles.keys}, label, unnest(range(len(dist))) AS class,"
        f" unnest(dist) AS prob\nFROM {evaluated}"
    )
    return f"""SELECT day, {roles.keys}, class, calibration_bin(prob, $bins)::BIGINT AS bin,
    count(*) AS rows,
    count(*) FILTER (WHERE class = label) AS label_rows,
    fsum(prob) AS sum_prob
FROM ({per_class})
GROUP BY ALL"""


def _confusion_sql(roles: ColumnRoles, evaluated: str) -> str:
    return f"""SELECT day, {roles.keys}, label, predicted::BIGINT AS predicted, count(*) AS rows
FROM {evaluated}
GROUP BY ALL"""


def _binary_sql(roles: ColumnRoles, evaluated: str) -> str:
    if KINDS[roles.kind][1] == "softmax":  # logits: the log-odds is z1 - z0
        s = "CAST(scores[2] AS DOUBLE) - CAST(scores[1] AS DOUBLE)"
    else:
        s = "ln(dist[2]) - ln(dist[1])"
    limit, scale, last = SCORE_LIMIT, SCORE_SCALE, SCORE_BINS - 1
    binned = (
        f"least(floor((greatest(least({s}, {limit}), -{limit}) + {limit}) * {scale}),"
        f" {last})::BIGINT"
    )
    return f"""SELECT day, {roles.keys}, score_bin,
    count(*) FILTER (WHERE label = 1) AS positives,
    count(*) FILTER (WHERE label = 0) AS negatives,
    fsum(dist[2]) AS sum_prob,
    fsum((dist[2] - label) * (dist[2] - label)) AS sum_brier
FROM (SELECT *, {binned} AS score_bin FROM {evaluated} WHERE len(dist) = 2)
GROUP BY ALL"""


EXTRA_SQL = {
    "class_bin_state": _class_bin_sql,
    "confusion_state": _confusion_sql,
    "binary_state": _binary_sql,
}
