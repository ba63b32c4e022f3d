"""The check's queries. Each is one streaming GROUP BY (the order check: one window per file)
over the log; the row classification reads the saved queries' normalised `predictions`.

Row reasons are exclusive and tested in the order listed; a row's label is judged even when
its scores are bad (its range only when its K is known).
"""

from dbmetrics.binary_scores import is_binary, pair_sql
from dbmetrics.queries.roles import class_index
from dbmetrics.queries.schema import quote
from dbmetrics.queries.score_kind import shape_sql
from dbmetrics.queries.state_sql import nested, predictions

from .params import Resolved

SCORE_REASONS = (  # (reason, condition on s = scores as DOUBLE[]), for every kind
    ("missing_scores", "s IS NULL OR len(s) = 0"),
    ("null_in_scores", "list_count(s) < len(s)"),
    ("nan_scores", "list_bool_or(list_transform(s, lambda v: isnan(v)))"),
)
LOGIT_REASONS = (  # +inf, or every class -inf (masked)
    ("infinite_scores", "NOT isfinite(list_max(s))"),
)
PROB_REASONS = (
    ("infinite_scores", "list_bool_or(list_transform(s, lambda v: isinf(v)))"),
    ("negative_probs", "list_min(s) < 0"),
    ("probs_not_summing_to_1", "abs(list_sum(s) - 1) > $tolerance"),
)
TARGET_REASONS = (  # on t = the soft target as DOUBLE[]; NULL targets are not judged
    (
        "target_not_finite",
        "len(t) = 0 OR list_count(t) < len(t) "
        "OR NOT list_bool_and(list_transform(t, lambda v: isfinite(v)))",
    ),
    ("target_negative", "list_min(t) < 0"),
    ("target_not_summing_to_1", "abs(list_sum(t) - 1) > $tolerance"),
    ("target_length_differs", "len(s) > 0 AND len(t) <> len(s)"),
)


def _cases(reasons) -> str:
    whens = "".join(f"\n         WHEN {cond} THEN '{reason}'" for reason, cond in reasons)
    return f"CASE{whens}\n    END"


def label_reasons(r: Resolved) -> tuple:
    roles = r.roles
    if roles.label is None:
        return ()
    found = [("unlabelled", "label IS NULL")]
    if roles.labels is not None:
        found.append(("label_conflict_or_unknown", "label = -1"))
    elif roles.classes:
        found.append(("unknown_class", "label = -1"))
    found.append(("label_out_of_range", "label < 0 OR label >= k"))
    return tuple(found)


def rows(r: Resolved) -> str:
    """period x version x K x score reason x label reason x score shape -> rows (reason NULL:
    fine; shape as score_kind.shape_sql, on the raw scores)."""
    kind = r.roles.kind
    score = SCORE_REASONS + (PROB_REASONS if kind in ("probs", "binary_prob") else LOGIT_REASONS)
    labels = label_reasons(r)
    version = quote(r.roles.version)
    cast = (
        f"SELECT day, {version}, label, CAST(scores AS DOUBLE[]) AS s,\n"
        f"       {shape_sql('scores[2]' if is_binary(kind) else 'scores', kind)} AS shape\n"
        f"FROM {nested(predictions(r.roles))}"
    )
    sized = f"SELECT *, CASE WHEN len(s) > 0 THEN len(s) END AS k\nFROM {nested(cast)}"
    judged = (
        f"SELECT day, {version}, k,\n"
        f"    {_cases(score)} AS score_issue,\n"
        f"    {_cases(labels) if labels else 'NULL'} AS label_issue, shape\n"
        f"FROM {nested(sized)}"
    )
    return (
        f"SELECT CAST(date_trunc($grain, day) AS DATE) AS period, {version} AS version, k,\n"
        f"       score_issue, label_issue, shape, count(*) AS n\n"
        f"FROM {nested(judged)}\nGROUP BY ALL"
    )


def order(r: Resolved, file_col: str) -> str:
    """Per Parquet file: rows, NULL timestamps, and rows earlier than the nearest earlier
    non-NULL timestamp in file order (`file_row_number`)."""
    src = r.logs.sql[:-1] + f", filename = '{file_col}', file_row_number = true)"
    ordered = (
        f"SELECT {quote(file_col)} AS file, {quote(r.roles.time)} AS t,\n"
        f"       lag({quote(r.roles.time)} IGNORE NULLS) OVER (PARTITION BY "
        f"{quote(file_col)} ORDER BY file_row_number) AS prev\nFROM {src}"
    )
    return (
        "SELECT file, count(*) AS rows, count(*) FILTER (WHERE t IS NULL) AS null_timestamps,\n"
        "       count(*) FILTER (WHERE t < prev) AS out_of_order\n"
        f"FROM {nested(ordered)}\nGROUP BY file ORDER BY file"
    )


def duplicates(r: Resolved) -> str:
    """Ids seen more than once, the rows beyond each id's first, and rows with a NULL id."""
    per_id = f"SELECT {quote(r.id_col)} AS id, count(*) AS n FROM {r.logs.sql} GROUP BY 1"
    return (
        "SELECT count(*) FILTER (WHERE id IS NOT NULL AND n > 1) AS duplicated_ids,\n"
        "       coalesce(sum(n - 1) FILTER (WHERE id IS NOT NULL AND n > 1), 0) "
        "AS duplicate_rows,\n"
        "       coalesce(sum(n) FILTER (WHERE id IS NULL), 0) AS null_ids\n"
        f"FROM {nested(per_id)}"
    )


def labels_table(r: Resolved) -> str:
    """The separate labels: rows, NULL ids and labels, bad values, conflicts, orphans."""
    roles = r.roles
    idc, label = quote(roles.id), quote(roles.label)
    bad = (
        "count(*) FILTER (WHERE y = -1) AS unknown_class_labels"
        if roles.classes
        else "count(*) FILTER (WHERE y < 0) AS negative_labels"
    )
    per_row = (
        f"SELECT {idc} AS id, {label} AS raw, {class_index(roles, label)} AS y\n"
        f"FROM {roles.labels.sql}"
    )
    return f"""WITH lab AS {nested(per_row)},
conflicts AS (SELECT id FROM lab WHERE id IS NOT NULL GROUP BY id HAVING min(y) <> max(y))
SELECT count(*) AS label_rows,
       count(*) FILTER (WHERE id IS NULL) AS null_label_ids,
       count(*) FILTER (WHERE y IS NULL) AS null_labels,
       {bad},
       (SELECT count(*) FROM conflicts) AS conflicting_label_ids,
       count(*) FILTER (WHERE id IS NOT NULL AND NOT EXISTS (
           SELECT 1 FROM {roles.logs.sql} AS logs WHERE logs.{idc} = lab.id)) AS orphan_labels
FROM lab"""


def targets(r: Resolved) -> str:
    """Soft targets by reason (NULL reason: a distribution, or no target)."""
    scores = quote(r.roles.scores)
    if is_binary(r.roles.kind):
        scores = pair_sql(r.roles.kind, scores)  # only its length (2) is used
    rows_sql = (
        f"SELECT CAST({quote(r.target_col)} AS DOUBLE[]) AS t, "
        f"CAST({scores} AS DOUBLE[]) AS s\nFROM {r.logs.sql}"
    )
    return (
        f"SELECT CASE WHEN t IS NULL THEN 'no_target' ELSE {_cases(TARGET_REASONS)} END "
        f"AS reason, count(*) AS n\nFROM {nested(rows_sql)}\nGROUP BY ALL"
    )
