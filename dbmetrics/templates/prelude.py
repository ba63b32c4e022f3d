"""The column map and the shared SQL fragments every template rolls up from.

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
from dataclasses import dataclass

from dbmetrics.errors import DbmetricsError

from .schema import Source, quote
from .values import split_names

STATE_COLUMNS = ("day", "bin", "rows", "labelled_rows", "missing_scores", "invalid_scores",
                 "scored_rows", "bad_labels", "infinite_loss_rows", "evaluated_rows",
                 "correct_rows", "sum_confidence", "sum_entropy", "sum_loss", "sum_loss_sq",
                 "sum_brier", "sum_confidence_evaluated")
CLASS_STATE_COLUMNS = ("day", "class", "sum_prob", "predicted_rows", "label_rows")
INTERNAL = ("scores", "label", "stats", "evaluated", "dist", "prob", "predicted", "label_ok")
KINDS = {  # scores_kind -> (row-stats function, distribution function, scalar wrapper)
    "logits": ("logit_row_stats", "softmax", None),
    "probs": ("prob_row_stats", "as_distribution", None),
    "binary_logit": ("logit_row_stats", "softmax", "[0.0, {s}]"),
    "binary_prob": ("prob_row_stats", "as_distribution", "[1.0 - {s}, {s}]"),
}
TIME_TYPES = ("DATE", "TIMESTAMP")
INTEGER_TYPES = ("TINYINT", "SMALLINT", "INTEGER", "BIGINT", "HUGEINT", "UTINYINT",
                 "USMALLINT", "UINTEGER", "UBIGINT", "BOOLEAN")
NUMERIC_TYPES = INTEGER_TYPES + ("FLOAT", "DOUBLE", "DECIMAL", "REAL")


@dataclass(frozen=True)
class ColumnMap:
    """Which column plays which role; names are the sources' own spellings."""
    logs: Source
    time: str
    scores: str
    kind: str
    version: str
    segments: tuple
    label: str | None
    labels: Source | None
    id: str | None
    classes: bool

    @property
    def keys(self) -> str:
        return ", ".join(quote(c) for c in (self.version, *self.segments))


def column_map(texts: dict, sources: dict, reserved: set) -> ColumnMap:
    """Check the column-map parameters against the logs (and labels) schema."""
    logs, labels = sources["logs"], sources.get("labels")
    time = logs.column(texts["time_col"], "time_col")
    scores = logs.column(texts["scores_col"], "scores_col")
    version = logs.column(texts["version_col"], "version_col")
    segments = tuple(logs.column(c, "segment_cols") for c in split_names(texts["segment_cols"]))
    kind = texts["scores_kind"]
    check_type(logs, time, "time_col", TIME_TYPES, "a DATE or TIMESTAMP column")
    if kind.startswith("binary_"):
        check_type(logs, scores, "scores_col", NUMERIC_TYPES,
                   f"a single number per row for scores_kind={kind}")
    elif not (logs.type_of(scores).endswith("]")
              and logs.type_of(scores).rsplit("[", 1)[0].startswith(NUMERIC_TYPES)):
        raise DbmetricsError(f"scores_col: column `{scores}` is {logs.type_of(scores)}; "
                             f"scores_kind={kind} expects a list of numbers (FLOAT[] or DOUBLE[]); "
                             "for one score per row use binary_logit or binary_prob")
    id_col = None
    if labels is not None:
        if not texts["id_col"]:
            raise DbmetricsError("id_col: labels come from a separate table, so id_col must "
                                 "name the prediction id present in both logs and labels")
        id_col = logs.column(texts["id_col"], "id_col")
        labels.column(texts["id_col"], "id_col")
    label_source = labels or logs
    if labels is not None and not texts["label_col"]:
        raise DbmetricsError("label_col: labels come from a separate table, so label_col must "
                             "name its label column")
    label = label_source.column(texts["label_col"], "label_col") if texts["label_col"] else None
    if label is not None and not texts["classes"] and not label_source.type_of(label).startswith(
            INTEGER_TYPES):
        raise DbmetricsError(f"label_col: column `{label}` is {label_source.type_of(label)}; "
                             "labels must be 0-based class indices, or names with "
                             "classes=NAME0,NAME1,... in class-index order")
    keys = [version, *segments]
    clashes = sorted({k for k in keys if k.lower() in reserved or keys.count(k) > 1})
    if clashes:
        raise DbmetricsError(f"version_col/segment_cols: `{', '.join(clashes)}` is used twice "
                             "or clashes with a computed column name; rename it in a view")
    return ColumnMap(logs, time, scores, kind, version, segments, label, labels, id_col,
                     bool(texts["classes"]))


def check_type(source: Source, col: str, role: str, prefixes: tuple, wanted: str) -> None:
    kind = source.type_of(col)
    if kind.endswith("]") or not kind.startswith(prefixes):
        raise DbmetricsError(f"{role}: column `{col}` is {source.type_of(col)}; expected {wanted}")


def class_index(cmap: ColumnMap, expr: str) -> str:
    """A label expression as a BIGINT class index; unknown class names become -1 (bad)."""
    if not cmap.classes:  # a label too large for BIGINT is a bad label, not a failed query
        return (f"CASE WHEN {expr} IS NULL THEN NULL "
                f"ELSE coalesce(TRY_CAST({expr} AS BIGINT), -1) END")
    return (f"CASE WHEN {expr} IS NULL THEN NULL ELSE coalesce(list_position("
            f"list_transform(string_split($classes, ','), lambda c: trim(c)), "
            f"CAST({expr} AS VARCHAR)) - 1, -1) END")


def nested(sql: str) -> str:
    """`sql` as an indented subquery."""
    return "(\n" + textwrap.indent(sql, "    ") + "\n)"


def predictions(cmap: ColumnMap, window: bool = False) -> str:
    """One row per prediction: day, keys, scores, label.

    window: keep only $window_start <= time < $window_end (bound TIMESTAMPs), a filter
    DuckDB pushes into the Parquet scan, so row groups outside it are skipped.
    """
    wrap = KINDS[cmap.kind][2]
    scores = f"logs.{quote(cmap.scores)}"
    if wrap:
        scores = f"CASE WHEN {scores} IS NULL THEN NULL ELSE {wrap.format(s=scores)} END"
    keys = ", ".join(f"logs.{quote(c)}" for c in (cmap.version, *cmap.segments))
    join = ""
    if cmap.labels is not None:
        label = "late.label"
        idc = quote(cmap.id)
        late = (f"SELECT {idc}, CASE WHEN min(y) <> max(y) THEN -1 ELSE min(y) END AS label\n"
                f"FROM (SELECT {idc}, {class_index(cmap, quote(cmap.label))} AS y "
                f"FROM {cmap.labels.sql})\nGROUP BY {idc}")
        join = (f"\n-- late labels; an id with conflicting labels is a bad label"
                f"\nLEFT JOIN {nested(late)} AS late ON logs.{idc} = late.{idc}")
    elif cmap.label is not None:
        label = class_index(cmap, f"logs.{quote(cmap.label)}")
    else:
        label = "CAST(NULL AS BIGINT)"
    where = ""
    if window:
        time = f"logs.{quote(cmap.time)}"
        where = (f"\nWHERE {time} >= CAST($window_start AS TIMESTAMP)"
                 f" AND {time} < CAST($window_end AS TIMESTAMP)")
    return (f"SELECT CAST(logs.{quote(cmap.time)} AS DATE) AS day, {keys},\n"
            f"       {scores} AS scores,\n       {label} AS label\n"
            f"FROM {cmap.logs.sql} AS logs{join}{where}")


def row_stats(cmap: ColumnMap, window: bool = False) -> str:
    """predictions plus the struct of per-row statistics (one UDF call per row)."""
    fn = KINDS[cmap.kind][0]
    return (f"SELECT day, {cmap.keys}, scores, label, {fn}(scores, label, $bins) AS stats\n"
            f"FROM {nested(predictions(cmap, window))}")


def state(cmap: ColumnMap, window: bool = False, rows: str | None = None) -> str:
    """STATE (see module docstring) as a SELECT; `rows` names a relation that already holds
    day, keys, label and stats (the numpy engine's output) instead of the UDF call."""
    evaluated = (f"SELECT *, coalesce(stats.score_issue = 0 AND stats.label_issue = 0\n"
                 f"                   AND isfinite(stats.loss), false) AS evaluated\n"
                 f"FROM {rows or nested(row_stats(cmap, window))}")
    return f"""SELECT day, {cmap.keys}, stats.bin AS bin,
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


def class_state(cmap: ColumnMap, window: bool = False) -> str:
    """CLASS_STATE (see module docstring) as a SELECT."""
    dist = KINDS[cmap.kind][1]
    scored = (f"SELECT day, {cmap.keys}, label, stats.predicted AS predicted,\n"
              f"       stats.label_issue = 0 AS label_ok, {dist}(scores) AS dist\n"
              f"FROM {nested(row_stats(cmap, window))}\nWHERE stats.score_issue = 0")
    per_class = (f"SELECT day, {cmap.keys}, label, predicted, label_ok,\n"
                 f"       unnest(range(len(dist))) AS class, unnest(dist) AS prob\n"
                 f"FROM {nested(scored)}")
    return f"""SELECT day, {cmap.keys}, class,
    fsum(prob) AS sum_prob,
    count(*) FILTER (WHERE class = predicted) AS predicted_rows,
    count(*) FILTER (WHERE class = label AND label_ok) AS label_rows
FROM {nested(per_class)}
GROUP BY ALL"""


def fragments(cmap: ColumnMap) -> dict:
    """The {{placeholders}} the column map provides to template bodies.

    state / class_state: the two additive states (SELECTs); predictions: one row per
    prediction (day, keys, scores as a list, label as a class index); segments: `, "seg1", "seg2"`
    (comma-led, empty without segments); segment_match: `cur."seg" IS NOT DISTINCT FROM
    ref."seg" AND ...` (aliases cur and ref; `true` without segments); and each column-map
    column parameter, quoted.
    """
    match = " AND ".join(f"cur.{quote(c)} IS NOT DISTINCT FROM ref.{quote(c)}"
                         for c in cmap.segments)
    columns = {"time_col": cmap.time, "scores_col": cmap.scores, "version_col": cmap.version,
               "label_col": cmap.label, "id_col": cmap.id}
    return {
        **{name: quote(col) for name, col in columns.items() if col is not None},
        "segment_cols": ", ".join(quote(c) for c in cmap.segments),
        "state": textwrap.indent(state(cmap), "    ").lstrip(),
        "class_state": textwrap.indent(class_state(cmap), "    ").lstrip(),
        "predictions": textwrap.indent(predictions(cmap), "    ").lstrip(),
        "segments": "".join(f", {quote(c)}" for c in cmap.segments),
        "segment_match": match or "true",
    }
