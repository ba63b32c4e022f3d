"""Column roles: which column of the logs (and of a label table) plays which part.

`column_roles` checks the role parameters (time_col, scores_col, scores_kind, label_col,
version_col, segment_cols, labels, id_col, classes) against the real schema and returns a
`ColumnRoles`; `class_index` turns a label expression into a BIGINT class index.
"""

from dataclasses import dataclass

from dbmetrics.errors import DbmetricsError

from .schema import Source, quote
from .values import split_names

KINDS = {  # scores_kind -> (row-stats function, distribution function, scalar wrapper)
    "logits": ("logit_row_stats", "softmax", None),
    "probs": ("prob_row_stats", "as_distribution", None),
    "binary_logit": ("logit_row_stats", "softmax", "[0.0, {s}]"),
    "binary_prob": ("prob_row_stats", "as_distribution", "[1.0 - {s}, {s}]"),
}
TIME_TYPES = ("DATE", "TIMESTAMP")
INTEGER_TYPES = (
    "TINYINT",
    "SMALLINT",
    "INTEGER",
    "BIGINT",
    "HUGEINT",
    "UTINYINT",
    "USMALLINT",
    "UINTEGER",
    "UBIGINT",
    "BOOLEAN",
)
NUMERIC_TYPES = INTEGER_TYPES + ("FLOAT", "DOUBLE", "DECIMAL", "REAL")


@dataclass(frozen=True)
class ColumnRoles:
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


def column_roles(texts: dict, sources: dict, reserved: set) -> ColumnRoles:
    """Check the column-role parameters against the logs (and labels) schema."""
    logs, labels = sources["logs"], sources.get("labels")
    time = logs.column(texts["time_col"], "time_col")
    scores = logs.column(texts["scores_col"], "scores_col")
    version = logs.column(texts["version_col"], "version_col")
    segments = tuple(logs.column(c, "segment_cols") for c in split_names(texts["segment_cols"]))
    kind = texts["scores_kind"]
    check_type(logs, time, "time_col", TIME_TYPES, "a DATE or TIMESTAMP column")
    if kind.startswith("binary_"):
        check_type(
            logs,
            scores,
            "scores_col",
            NUMERIC_TYPES,
            f"a single number per row for scores_kind={kind}",
        )
    elif not (
        logs.type_of(scores).endswith("]")
        and logs.type_of(scores).rsplit("[", 1)[0].startswith(NUMERIC_TYPES)
    ):
        raise DbmetricsError(
            f"scores_col: column `{scores}` is {logs.type_of(scores)}; "
            f"scores_kind={kind} expects a list of numbers (FLOAT[] or DOUBLE[]); "
            "for one score per row use binary_logit or binary_prob"
        )
    id_col = None
    if labels is not None:
        if not texts["id_col"]:
            raise DbmetricsError(
                "id_col: labels come from a separate table, so id_col must "
                "name the prediction id present in both logs and labels"
            )
        id_col = logs.column(texts["id_col"], "id_col")
        labels.column(texts["id_col"], "id_col")
    label_source = labels or logs
    if labels is not None and not texts["label_col"]:
        raise DbmetricsError(
            "label_col: labels come from a separate table, so label_col must name its label column"
        )
    label = label_source.column(texts["label_col"], "label_col") if texts["label_col"] else None
    if (
        label is not None
        and not texts["classes"]
        and not label_source.type_of(label).startswith(INTEGER_TYPES)
    ):
        raise DbmetricsError(
            f"label_col: column `{label}` is {label_source.type_of(label)}; "
            "labels must be 0-based class indices, or names with "
            "classes=NAME0,NAME1,... in class-index order"
        )
    keys = [version, *segments]
    clashes = sorted({k for k in keys if k.lower() in reserved or keys.count(k) > 1})
    if clashes:
        raise DbmetricsError(
            f"version_col/segment_cols: `{', '.join(clashes)}` is used twice "
            "or clashes with a computed column name; rename it in a view"
        )
    return ColumnRoles(
        logs, time, scores, kind, version, segments, label, labels, id_col, bool(texts["classes"])
    )


def check_type(source: Source, col: str, role: str, prefixes: tuple, wanted: str) -> None:
    kind = source.type_of(col)
    if kind.endswith("]") or not kind.startswith(prefixes):
        raise DbmetricsError(f"{role}: column `{col}` is {source.type_of(col)}; expected {wanted}")


def class_index(roles: ColumnRoles, expr: str) -> str:
    """A label expression as a BIGINT class index; unknown class names become -1 (bad)."""
    if not roles.classes:  # a label too large for BIGINT is a bad label, not a failed query
        return (
            f"CASE WHEN {expr} IS NULL THEN NULL ELSE coalesce(TRY_CAST({expr} AS BIGINT), -1) END"
        )
    return (
        f"CASE WHEN {expr} IS NULL THEN NULL ELSE coalesce(list_position("
        f"list_transform(string_split($classes, ','), lambda c: trim(c)), "
        f"CAST({expr} AS VARCHAR)) - 1, -1) END"
    )
