"""The column roles and the shared SQL fragments every template rolls up from.

`predictions` normalises any log schema to: day, the version and segment columns (own
names), scores (a numeric list per scores_kind) and label (BIGINT class index). Two additive
states are built from it, each a self-contained GROUP BY (streams; no per-row state):

STATE: one row per day x version x segments x calibration bin (bin NULL for unscored rows)
    rows, labelled_rows, missing_scores, invalid_scores, scored_rows, bad_labels,
    infinite_loss_rows, evaluated_rows, correct_rows,           -- BIGINT counts
    sum_confidence, sum_entropy,                                -- over scored rows
    sum_loss, sum_loss_sq, sum_brier, sum_brier_sq,             -- over evaluated rows
    sum_confidence_evaluated
CLASS_STATE: one row per day x version x segments x class (scored rows only)
    sum_prob (sum of predicted probabilities), predicted_rows (argmax = class),
    label_rows (label = class, label in range), and sums over evaluated rows for the
    per-class views (support, true positives, loss, top-k; see class_sums.py)
CLASS_BIN_STATE, CONFUSION_STATE, BINARY_STATE: see class_sums.py

Row categories (exclusive, in this order): missing scores (NULL/empty), invalid scores
(NaN, +inf logit, all classes masked, probabilities not a distribution), then among scored
rows: unlabelled, bad label (out of [0, K) or a name not in `classes`, or conflicting late
labels), infinite loss (true class has probability 0), and evaluated (all else). Loss,
accuracy, Brier and calibration use evaluated rows only; entropy and confidence use scored
rows. Every sum is a Kahan sum (fsum) and 0 when empty, so states add across days/files.
"""

import textwrap

from dbmetrics.binary_scores import is_binary, pair_sql
from dbmetrics.kernels.row_stats import (
    INVALID,
    LABEL_OUT_OF_RANGE,
    MISSING,
    NOT_A_DISTRIBUTION,
    UNLABELLED,
)
from dbmetrics.kernels.state_jit import COUNTS, SUMS
from dbmetrics.udf_adapters import ROW_STATS_TYPE

from .class_sums import (
    CLASS_COLUMNS_ADDED,
    EXTRA_SQL,
    EXTRA_STATES,
    LABEL_RANK_SQL,
    TOP_K,
    evaluated_rows_sql,
)
from .roles import KINDS, ColumnRoles, class_index, day, day_start, key_fragments
from .schema import quote

# STATE's columns: the compiled kernel's accumulators, in the order every route returns them.
STATE_COLUMNS = ("day", "bin", *COUNTS, *SUMS)
CLASS_STATE_COLUMNS = (
    "day",
    "class",
    "sum_prob",
    "predicted_rows",
    "label_rows",
    *CLASS_COLUMNS_ADDED,
)
INTERNAL = (
    "scores",
    "label",
    "stats",
    "evaluated",
    "dist",
    "prob",
    "predicted",
    "label_ok",
    "loss",
    "label_rank",
    "pair_id",
    *{c for _, (keys, sums) in EXTRA_STATES.items() for c in keys + sums},
)


def nested(sql: str) -> str:
    """`sql` as an indented subquery."""
    return "(\n" + textwrap.indent(sql, "    ") + "\n)"


def predictions(roles: ColumnRoles, window: bool = False, extra: dict | None = None) -> str:
    """One row per prediction: day, keys, scores, label (and `extra`: alias -> expression
    over the logs' columns, e.g. the prediction id).

    window: keep only $window_start <= time < $window_end (bound TIMESTAMPs), a filter
    DuckDB pushes into the Parquet scan, so row groups outside it are skipped.
    """
    scores = f"logs.{quote(roles.scores)}"
    if is_binary(roles.kind):
        scores = f"CASE WHEN {scores} IS NULL THEN NULL ELSE {pair_sql(roles.kind, scores)} END"
    keys = ", ".join(f"logs.{quote(c)}" for c in (roles.version, *roles.segments))
    join = ""
    if roles.labels is not None:
        label = "late.label"
        idc = quote(roles.id)
        late = (
            f"SELECT {idc}, CASE WHEN min(y) <> max(y) THEN -1 ELSE min(y) END AS label\n"
            f"FROM (SELECT {idc}, {class_index(roles, quote(roles.label))} AS y "
            f"FROM {roles.labels.sql})\nGROUP BY {idc}"
        )
        join = (
            f"\n-- late labels; an id with conflicting labels is a bad label"
            f"\nLEFT JOIN {nested(late)} AS late ON logs.{idc} = late.{idc}"
        )
    elif roles.label is not None:
        label = class_index(roles, f"logs.{quote(roles.label)}")
    else:
        label = "CAST(NULL AS BIGINT)"
    where = ""
    if window:
        time = f"logs.{quote(roles.time)}"
        where = (
            f"\nWHERE {time} >= {day_start(roles, '$window_start')}"
            f" AND {time} < {day_start(roles, '$window_end')}"
        )
    carried = "".join(f",\n       {expr} AS {alias}" for alias, expr in (extra or {}).items())
    return (
        f"SELECT {day(roles, 'logs.' + quote(roles.time))} AS day, {keys},\n"
        f"       {scores} AS scores,\n       {label} AS label{carried}\n"
        f"FROM {roles.logs.sql} AS logs{join}{where}"
    )


def row_stats(roles: ColumnRoles, window: bool = False) -> str:
    """predictions plus the struct of per-row statistics (one UDF call per row)."""
    fn = KINDS[roles.kind][0]
    return (
        f"SELECT day, {roles.keys}, scores, label, {fn}(scores, label, $bins) AS stats\n"
        f"FROM {nested(predictions(roles, window))}"
    )


# The row-statistics fields, in the order of the struct every route returns (the Python UDF,
# the numpy engine, the SQL macro and sql_row_stats below): one list, udf_adapters.ROW_STATS_TYPE.
ROW_STAT_FIELDS = tuple(f.name for f in ROW_STATS_TYPE)
_SQL_TYPES = {"int8": "TINYINT", "int32": "INTEGER", "double": "DOUBLE", "bool": "BOOLEAN"}


def sql_row_stats(roles: ColumnRoles, window: bool = False) -> str:
    """predictions plus the row-statistics struct computed by DuckDB's own vectorised SQL
    (logits kinds): the row maximum, the exp list and its sum are columns of nested SELECTs,
    each computed once per row, so nothing is recomputed per class. Same conventions and
    codes as kernels/row_stats.logit_row_stats (checked equal by the conformance tests):
    d = z - max(z), s = sum exp(d); loss = log s - d_y, confidence = 1/s, entropy =
    log s - sum p_j d_j (masked classes add 0), Brier = sum (p_j - [j = y])^2."""
    if KINDS[roles.kind][0] != "logit_row_stats":
        raise ValueError(f"the SQL row statistics take logits, not scores_kind={roles.kind}")
    shape = (
        f"SELECT day, {roles.keys}, scores, label, len(scores) AS k,\n"
        f"       list_max(scores)::DOUBLE AS m, list_count(scores) AS present_values\n"
        f"FROM {nested(predictions(roles, window))}"
    )
    issues = (
        f"SELECT *,\n"
        f"    CASE WHEN coalesce(k, 0) = 0 THEN {MISSING}\n"
        f"         WHEN isfinite(m) AND present_values = k THEN 0 ELSE {INVALID} END"
        f" AS score_issue,\n"
        f"    CASE WHEN label IS NULL THEN {UNLABELLED}\n"
        f"         WHEN k > 0 AND (label < 0 OR label >= k) THEN {LABEL_OUT_OF_RANGE}"
        f" ELSE 0 END AS label_issue\n"
        f"FROM {nested(shape)}"
    )
    exps = (
        "SELECT *, list_sum(e) AS s\nFROM (\n"
        "    SELECT *, CASE WHEN score_issue = 0\n"
        "                   THEN list_transform(scores, lambda v: exp(v - m)) END AS e\n"
        f"    FROM {nested(issues)}\n)"
    )
    y = "CASE WHEN score_issue = 0 AND label_issue = 0 THEN label END"
    expressions = {
        "score_issue": "score_issue",
        "label_issue": "label_issue",
        "classes": f"CASE WHEN score_issue <> {MISSING} THEN k END",
        "loss": "ln(s) - (scores[y + 1] - m)",
        "confidence": "1.0 / s",
        "predicted": "CASE WHEN score_issue = 0 THEN list_position(scores, list_max(scores)) - 1 END",
        "correct": "list_position(scores, list_max(scores)) - 1 = y",
        "brier": "list_sum(list_transform(e, lambda x, i:"
        " (x / s - (i = y + 1)::DOUBLE) * (x / s - (i = y + 1)::DOUBLE)))",
        "entropy": "ln(s) - list_sum(list_transform(e, lambda x, i:"
        " CASE WHEN x > 0.0 THEN x / s * (scores[i] - m) ELSE 0.0 END))",
        "bin": "dbmetrics_bin(1.0 / s, dbmetrics_row_bins($bins))",
    }
    assert tuple(expressions) == ROW_STAT_FIELDS, "one expression per row-statistics field"
    struct = ",\n".join(
        f"    '{name}': ({expressions[name]})::{_SQL_TYPES[str(f.type)]}"
        for name, f in zip(ROW_STAT_FIELDS, ROW_STATS_TYPE)
    )
    return (
        f"SELECT day, {roles.keys}, label, {{\n{struct}\n}} AS stats\n"
        f"FROM (SELECT *, {y} AS y FROM {nested(exps)})"
    )


def state(roles: ColumnRoles, window: bool = False, rows: str | None = None) -> str:
    """STATE (see module docstring) as a SELECT; `rows` is a relation (a name, or a nested
    SELECT such as sql_row_stats) that already holds day, keys, label and stats (the numpy
    engine's output, or DuckDB's SQL) instead of the UDF call. Row-issue codes are the
    kernel's constants (kernels/row_stats.py)."""
    evaluated = (
        f"SELECT *, coalesce(stats.score_issue = 0 AND stats.label_issue = 0\n"
        f"                   AND isfinite(stats.loss), false) AS evaluated\n"
        f"FROM {rows or nested(row_stats(roles, window))}"
    )
    return f"""SELECT day, {roles.keys}, stats.bin AS bin,
    count(*) AS rows,
    count(label) AS labelled_rows,
    count(*) FILTER (WHERE stats.score_issue = {MISSING}) AS missing_scores,
    count(*) FILTER (WHERE stats.score_issue IN ({INVALID}, {NOT_A_DISTRIBUTION})) AS invalid_scores,
    count(*) FILTER (WHERE stats.score_issue = 0) AS scored_rows,
    count(*) FILTER (WHERE stats.score_issue = 0
                     AND stats.label_issue = {LABEL_OUT_OF_RANGE}) AS bad_labels,
    count(*) FILTER (WHERE stats.score_issue = 0 AND stats.label_issue = 0
                     AND stats.loss = 'inf') AS infinite_loss_rows,
    count(*) FILTER (WHERE evaluated) AS evaluated_rows,
    count(*) FILTER (WHERE evaluated AND stats.correct) AS correct_rows,
    coalesce(fsum(stats.confidence), 0) AS sum_confidence,
    coalesce(fsum(stats.entropy), 0) AS sum_entropy,
    coalesce(fsum(stats.loss) FILTER (WHERE evaluated), 0) AS sum_loss,
    coalesce(fsum(stats.loss * stats.loss) FILTER (WHERE evaluated), 0) AS sum_loss_sq,
    coalesce(fsum(stats.brier) FILTER (WHERE evaluated), 0) AS sum_brier,
    coalesce(fsum(stats.brier * stats.brier) FILTER (WHERE evaluated), 0) AS sum_brier_sq,
    coalesce(fsum(stats.confidence) FILTER (WHERE evaluated), 0) AS sum_confidence_evaluated
FROM {nested(evaluated)}
GROUP BY ALL"""


def class_state(roles: ColumnRoles, window: bool = False) -> str:
    """CLASS_STATE (see module docstring) as a SELECT."""
    dist = KINDS[roles.kind][1]
    scored = (
        f"SELECT day, {roles.keys}, label, stats.predicted AS predicted,\n"
        f"       stats.label_issue = 0 AS label_ok, stats.loss AS loss,\n"
        f"       coalesce(stats.label_issue = 0 AND isfinite(stats.loss), false) AS evaluated,\n"
        f"       {dist}(scores) AS dist\n"
        f"FROM {nested(row_stats(roles, window))}\nWHERE stats.score_issue = 0"
    )
    per_class = (
        f"SELECT day, {roles.keys}, label, predicted, label_ok, evaluated, loss,\n"
        f"       CASE WHEN evaluated THEN {LABEL_RANK_SQL} END AS label_rank,\n"
        f"       unnest(range(len(dist))) AS class, unnest(dist) AS prob\n"
        f"FROM {nested(scored)}"
    )
    top = "".join(
        f"\n    count(*) FILTER (WHERE evaluated AND class = label AND label_rank < {k})"
        f" AS top{k}_rows,"
        for k in TOP_K
    )
    return f"""SELECT day, {roles.keys}, class,
    fsum(prob) AS sum_prob,
    count(*) FILTER (WHERE class = predicted) AS predicted_rows,
    count(*) FILTER (WHERE class = label AND label_ok) AS label_rows,
    count(*) FILTER (WHERE evaluated AND class = label) AS support_rows,
    count(*) FILTER (WHERE evaluated AND class = predicted) AS predicted_evaluated_rows,
    count(*) FILTER (WHERE evaluated AND class = label AND class = predicted) AS true_positive_rows,
    coalesce(fsum(loss) FILTER (WHERE evaluated AND class = label), 0) AS sum_class_loss,
    coalesce(fsum(prob) FILTER (WHERE evaluated), 0) AS sum_prob_evaluated,{top.rstrip(",")}
FROM {nested(per_class)}
GROUP BY ALL"""


def extra_state(kind: str, roles: ColumnRoles, window: bool = False) -> str:
    """CLASS_BIN_STATE, CONFUSION_STATE or BINARY_STATE (class_sums.py) as a SELECT."""
    evaluated = nested(evaluated_rows_sql(roles, nested(row_stats(roles, window))))
    return EXTRA_SQL[kind](roles, evaluated)


def empty_binary_state(roles: ColumnRoles) -> str:
    """BINARY_STATE's columns and no rows, for logs that are not two-class."""
    keys, sums = EXTRA_STATES["binary_state"]
    columns = ", ".join(
        f"CAST(NULL AS {'DOUBLE' if c.startswith('sum_') else 'BIGINT'}) AS {c}"
        for c in keys + sums
    )
    return f"SELECT day, {roles.keys}, {columns}\nFROM {nested(predictions(roles))}\nLIMIT 0"


def fragments(roles: ColumnRoles, sql_state: bool = False) -> dict:
    """The {{placeholders}} the column roles provides to template bodies.

    state / class_state: the two additive states (SELECTs); predictions: one row per
    prediction (day, keys, scores as a list, label as a class index); segments: `, "seg1", "seg2"`
    (comma-led, empty without segments); segment_match: `cur."seg" IS NOT DISTINCT FROM
    ref."seg" AND ...` (aliases cur and ref; `true` without segments); and each column-role
    column parameter, quoted.
    """
    logits = KINDS[roles.kind][0] == "logit_row_stats"
    rows = nested(sql_row_stats(roles)) if sql_state and logits else None
    columns = {
        "time_col": roles.time,
        "scores_col": roles.scores,
        "label_col": roles.label,
        "id_col": roles.id,
    }
    return {
        **{name: quote(col) for name, col in columns.items() if col is not None},
        **key_fragments(roles.version, roles.segments),
        "state": textwrap.indent(state(roles, rows=rows), "    ").lstrip(),
        "class_state": textwrap.indent(class_state(roles), "    ").lstrip(),
        **{
            kind: textwrap.indent(extra_state(kind, roles), "    ").lstrip()
            for kind in EXTRA_STATES
        },
        "predictions": textwrap.indent(predictions(roles), "    ").lstrip(),
    }
