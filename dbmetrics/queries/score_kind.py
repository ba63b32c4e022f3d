"""Does `scores_kind` fit the scores? A cheap look at a sample of the log.

A probability log run as logits gives a wrong cross-entropy and ECE without any row being
invalid, so nothing else would show it. Each scored row is classed by its shape (`SHAPES`):

    distribution  every entry in [0, 1] and the sum within SUM_TOLERANCE of 1
    percentages   every entry in [0, 100] and the sum within 100 * SUM_TOLERANCE of 100
    unit          (one score per row) the score lies in [0, 1]
    other         anything else with finite entries

Rows that are NULL, empty, or hold a NULL, NaN or infinite entry are not judged. The verdict
(`mismatch`) is one of:

- logits (or binary_logit) declared, and every judged row is a distribution (a single score
  in [0, 1]): they look like probabilities;
- probs (or binary_prob) declared, and most judged rows (at least half) are not
  distributions (scores outside [0, 1]): they look like logits, or percentages when every
  such row sums to 100.

`sample` reads the first SAMPLE_ROWS non-NULL scores only (DuckDB stops the scan there),
and also gives the class counts K seen there (`classes_mismatch` compares them with the
names in `classes`); `dbmetrics check` classes every row with the same SQL.
"""

from dataclasses import dataclass

from dbmetrics.binary_scores import is_binary
from dbmetrics.kernels.distributions import SUM_TOLERANCE

from .schema import quote

SAMPLE_ROWS = 10_000
SHAPES = ("distribution", "percentages", "unit", "other")


def shape_sql(expr: str, kind: str) -> str:
    """A CASE giving the shape of the raw scores `expr` (a list, or one number for binary_*)."""
    if is_binary(kind):
        return (
            f"CASE WHEN {expr} IS NULL OR NOT isfinite(CAST({expr} AS DOUBLE)) THEN NULL\n"
            f"     WHEN {expr} BETWEEN 0 AND 1 THEN 'unit' ELSE 'other' END"
        )
    s = f"CAST({expr} AS DOUBLE[])"
    tol = repr(SUM_TOLERANCE)
    return (
        f"CASE WHEN {s} IS NULL OR len({s}) = 0 OR list_count({s}) < len({s})\n"
        f"          OR NOT list_bool_and(list_transform({s}, lambda v: isfinite(v))) THEN NULL\n"
        f"     WHEN list_min({s}) >= 0 AND list_max({s}) <= 1\n"
        f"          AND abs(list_sum({s}) - 1) <= {tol} THEN 'distribution'\n"
        f"     WHEN list_min({s}) >= 0 AND list_max({s}) <= 100\n"
        f"          AND abs(list_sum({s}) - 100) <= 100 * {tol} THEN 'percentages'\n"
        f"     ELSE 'other' END"
    )


@dataclass(frozen=True)
class Sample:
    """shape -> rows among the first SAMPLE_ROWS rows with non-NULL scores, and the
    smallest and largest K there (None when no row has a K)."""

    shapes: dict
    k_min: int | None
    k_max: int | None


def sample(con, logs_sql: str, scores_col: str, kind: str, bound: dict) -> Sample:
    col = quote(scores_col)
    k = "2" if is_binary(kind) else "nullif(len(s), 0)"
    sql = (
        f"SELECT {shape_sql('s', kind)} AS shape, count(*), min({k}), max({k}) FROM (\n"
        f"    SELECT {col} AS s FROM {logs_sql} WHERE {col} IS NOT NULL LIMIT {SAMPLE_ROWS}\n"
        ") GROUP BY ALL"
    )
    rows = con.execute(sql, bound).fetchall()
    lows = [r[2] for r in rows if r[2] is not None]
    highs = [r[3] for r in rows if r[3] is not None]
    return Sample(
        {shape: n for shape, n, _, _ in rows if shape is not None},
        min(lows) if lows else None,
        max(highs) if highs else None,
    )


def classes_mismatch(names: list, s: Sample, scores_col: str) -> str | None:
    """An error message when `classes` names a different number of classes than the scores
    have (every sampled row has the same K), else None.

    >>> classes_mismatch(["a", "b"], Sample({}, 3, 3), "logits")
    'classes: 2 names given, but the scores (logits) have K = 3 classes; list one name per \
class, in class-index order'
    """
    if s.k_min is None or s.k_min != s.k_max or len(names) == s.k_min:
        return None
    return (
        f"classes: {len(names)} names given, but the scores ({scores_col}) have K = {s.k_min} "
        "classes; list one name per class, in class-index order"
    )


def mismatch(kind: str, shapes: dict, sampled: bool = True) -> str | None:
    """A one-line warning naming the likely kind when the shapes contradict `kind`, else None.

    >>> mismatch("logits", {"distribution": 40})
    'scores_kind=logits, but every one of the 40 scored rows sampled is a probability \
distribution (entries in [0, 1] summing to 1): if they are probabilities, set scores_kind=probs'
    >>> mismatch("logits", {"distribution": 40, "other": 1}) is None
    True
    """
    judged = sum(shapes.values())
    if not judged:
        return None
    where = "sampled " if sampled else ""
    fitting = shapes.get("distribution", 0) + shapes.get("unit", 0)
    if kind == "logits" and shapes.get("distribution", 0) == judged:
        return (
            f"scores_kind=logits, but every one of the {judged} scored rows {where}is a "
            "probability distribution (entries in [0, 1] summing to 1): if they are "
            "probabilities, set scores_kind=probs"
        )
    if kind == "binary_logit" and shapes.get("unit", 0) == judged:
        return (
            f"scores_kind=binary_logit, but every one of the {judged} scores {where}lies in "
            "[0, 1]: if they are probabilities of class 1, set scores_kind=binary_prob"
        )
    unfit = judged - fitting
    if kind in ("probs", "binary_prob") and 2 * unfit >= judged:
        percent = shapes.get("percentages", 0)
        if kind == "probs" and percent == unfit:
            likely = "percentages: divide them by 100 (e.g. in a view) and keep scores_kind=probs"
        else:
            likely = "logits: set scores_kind=" + ("logits" if kind == "probs" else "binary_logit")
        what = "are not probability distributions" if kind == "probs" else "lie outside [0, 1]"
        return (
            f"scores_kind={kind}, but {unfit} of the {judged} scored rows {where}{what} "
            f"(counted as invalid_scores); they look like {likely}"
        )
    return None
