"""The column roles and the shared SQL fragments every template rolls up from.

`predictions` normalises any log schema to: day, the version and segment columns (own
names), scores (a numeric list per scores_kind) and label (BIGINT class index). Two additive
states are built from it, each a self-contained GROUP BY (streams; no per-row state):

STATE: one row per day x version x segments x calibration bin (bin NULL for unscored rows)
    rows, labelled_rows, missing_scores, invalid_scores, scored_rows, bad_labels,
    infinite_loss_rows, evaluated_rows, correct_rows,           -- BIGINT counts
    sum_confidence, sum_entropy,                                -- over scored rows
    sum_loss, sum_loss_sq, sum_brier, sum_confidence_evaluated  -- over evaluated rows
CLASS_STATE: one row per day x version x segments x class (scored rows only)
    sum_prob (sum of predicted probabilities), predicted_rows (argmax = class),
    label_rows (label = class, label in range)

Row categories (exclusive, in this order): missing scores (NULL/empty), invalid scores
(NaN, +inf logit, all classes masked, probabilities not a distribution), then among scored
rows: unlabelled, bad label (out of [0, K) or a name not in `classes`, or conflicting late
labels), infinite loss (true class has probability 0), and evaluated (all else). Loss,
accuracy, Brier and calibration use evaluated rows only; entropy and confidence use scored
rows. Every sum is a Kahan sum (fsum) and 0 when empty, so states add across days/files.
"""

import textwrap

from .roles import KINDS, ColumnRoles, class_index, day, day_start, key_fragments
from .schema import quote

STATE_COLUMNS = (
    "day",
    "bin",
    "rows",
    "labelled_rows",
    "missing_scores",
    "invalid_scores",
    "scored_rows",
    "bad_labels",
    "infinite_loss_rows",
    "evaluated_rows",
    "correct_rows",
    "sum_confidence",
    "sum_entropy",
    "sum_loss",
    "sum_loss_sq",
    "sum_brier",
    "sum_confidence_evaluated",
)
CLASS_STATE_COLUMNS = ("day", "class", "sum_prob", "predicted_rows", "label_rows")
INTERNAL = ("scores", "label", "stats", "evaluated", "dist", "prob", "predicted", "label_ok")


def nested(sql: str) -> str:
    """`sql` as an indented subquery."""
    return "(\n" + textwrap.indent(sql, "    ") + "\n)"


def predictions(roles: ColumnRoles, window: bool = False) -> str:
    """One row per prediction: day, keys, scores, label.

    window: keep only $window_start <= time < $window_end (bound TIMESTAMPs), a filter
    DuckDB pushes into the Parquet scan, so row groups outside it are skipped.
    """
    wrap = KINDS[roles.kind][2]
    scores = f"logs.{quote(roles.scores)}"
    if wrap:
        scores = f"CASE WHEN {scores} IS NULL THEN NULL ELSE {wrap.format(s=scores)} END"
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
    return (
        f"SELECT {day(roles, 'logs.' + quote(roles.time))} AS day, {keys},\n"
        f"       {scores} AS scores,\n       {label} AS label\n"
        f"FROM {roles.logs.sql} AS logs{join}{where}"
    )


def row_stats(roles: ColumnRoles, window: bool = False) -> str:
    """predictions plus the struct of per-row statistics (one UDF call per row)."""
    fn = KINDS[roles.kind][0]
    return (
        f"SELECT day, {roles.keys}, scores, label, {fn}(scores, label, $bins) AS stats\n"
        f"FROM {nested(predictions(roles, window))}"
    )


def state(roles: ColumnRoles, window: bool = False, rows: str | None = None) -> str:
    """STATE (see module docstring) as a SELECT; `rows` names a relation that already holds
    day, keys, label and stats (the numpy engine's output) instead of the UDF call."""
    evaluated = (
        f"SELECT *, coalesce(stats.score_issue = 0 AND stats.label_issue = 0\n"
        f"                   AND isfinite(stats.loss), false) AS evaluated\n"
        f"FROM {rows or nested(row_stats(roles, window))}"
    )
    return f"""SELECT day, {roles.keys}, stats.bin AS bin,
    count(*) AS rows,
    count(label) AS labelled_rows,
    count(*) FILTER (WHERE stats.score_issue = 1) AS missing_scores,
    count(*) FILTER (WHERE stats.score_issue >= 2) AS invalid_scores,
    count(*) FILTER (WHERE stats.score_issue = 0) AS scored_rows,
    count(*) FILTER (WHERE stats.score_issue = 0 AND stats.label_issue = 2) AS bad_labels,
    count(*) FILTER (WHERE stats.score_issue = 0 AND stats.label_issue = 0
                     AND stats.loss = 'inf') AS infinite_loss_rows,
    count(*) FILTER (WHERE evaluated) AS evaluated_rows,
    count(*) FILTER (WHERE evaluated AND stats.correct) AS correct_rows,
    coalesce(fsum(stats.confidence), 0) AS sum_confidence,
    coalesce(fsum(stats.entropy), 0) AS sum_entropy,
    coalesce(fsum(stats.loss) FILTER (WHERE evaluated), 0) AS sum_loss,
    coalesce(fsum(stats.loss * stats.loss) FILTER (WHERE evaluated), 0) AS sum_loss_sq,
    coalesce(fsum(stats.brier) FILTER (WHERE evaluated), 0) AS sum_brier,
    coalesce(fsum(stats.confidence) FILTER (WHERE evaluated), 0) AS sum_confidence_evaluated
FROM {nested(evaluated)}
GROUP BY ALL"""


def class_state(roles: ColumnRoles, window: bool = False) -> str:
    """CLASS_STATE (see module docstring) as a SELECT."""
    dist = KINDS[roles.kind][1]
    scored = (
        f"SELECT day, {roles.keys}, label, stats.predicted AS predicted,\n"
        f"       stats.label_issue = 0 AS label_ok, {dist}(scores) AS dist\n"
        f"FROM {nested(row_stats(roles, window))}\nWHERE stats.score_issue = 0"
    )
    per_class = (
        f"SELECT day, {roles.keys}, label, predicted, label_ok,\n"
        f"       unnest(range(len(dist))) AS class, unnest(dist) AS prob\n"
        f"FROM {nested(scored)}"
    )
    return f"""SELECT day, {roles.keys}, class,
    fsum(prob) AS sum_prob,
    count(*) FILTER (WHERE class = predicted) AS predicted_rows,
    count(*) FILTER (WHERE class = label AND label_ok) AS label_rows
FROM {nested(per_class)}
GROUP BY ALL"""


def fragments(roles: ColumnRoles) -> dict:
    """The {{placeholders}} the column roles provides to template bodies.

    state / class_state: the two additive states (SELECTs); predictions: one row per
    prediction (day, keys, scores as a list, label as a class index); segments: `, "seg1", "seg2"`
    (comma-led, empty without segments); segment_match: `cur."seg" IS NOT DISTINCT FROM
    ref."seg" AND ...` (aliases cur and ref; `true` without segments); and each column-role
    column parameter, quoted.
    """
    columns = {
        "time_col": roles.time,
        "scores_col": roles.scores,
        "label_col": roles.label,
        "id_col": roles.id,
    }
    return {
        **{name: quote(col) for name, col in columns.items() if col is not None},
        **key_fragments(roles.version, roles.segments),
        "state": textwrap.indent(state(roles), "    ").lstrip(),
        "class_state": textwrap.indent(class_state(roles), "    ").lstrip(),
        "predictions": textwrap.indent(predictions(roles), "    ").lstrip(),
    }
