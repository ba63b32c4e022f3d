"""Column roles: which column of the logs (and of a label table) plays which part.

`column_roles` checks the role parameters (role_params.COLUMN_ROLES) against the real schema
and returns a `ColumnRoles`; `class_index` turns a label expression into a BIGINT class
index, `day` a time column into the prediction's day.

Conventions: a TIMESTAMPTZ's day starts at midnight in `timezone` (default UTC), whatever the
machine's or the session's time zone; a DATE or naive TIMESTAMP is read as written. A label
is an integer class index, a whole-number FLOAT/DOUBLE/DECIMAL (what an integer column with
NULLs becomes after a pandas round trip; NaN = not labelled), or a class name listed in
`classes`; a value equal to `unlabelled_value` is not labelled yet (NULL).
"""

import difflib
import math
from dataclasses import dataclass

import duckdb

from dbmetrics.binary_scores import is_binary
from dbmetrics.errors import DbmetricsError

from .role_params import DEFAULTS
from .schema import Source, quote
from .values import split_names

KINDS = {  # scores_kind -> (row-stats function, distribution function); binary_* scores are
    # read as two-class lists (dbmetrics.binary_scores)
    "logits": ("logit_row_stats", "softmax"),
    "probs": ("prob_row_stats", "as_distribution"),
    "binary_logit": ("logit_row_stats", "softmax"),
    "binary_prob": ("prob_row_stats", "as_distribution"),
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
FRACTIONAL_TYPES = ("FLOAT", "DOUBLE", "DECIMAL", "REAL")
NUMERIC_TYPES = INTEGER_TYPES + FRACTIONAL_TYPES
SCORE_TYPES = tuple(t for t in NUMERIC_TYPES if t != "BOOLEAN")  # a true/false is not a score
ZONED = "TIMESTAMP WITH TIME ZONE"


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
    timezone: str = DEFAULTS["timezone"]
    unlabelled: str | None = None
    classes_text: str | None = None

    @property
    def keys(self) -> str:
        return ", ".join(quote(c) for c in (self.version, *self.segments))

    @property
    def zoned(self) -> bool:
        """The time column is a TIMESTAMPTZ: its days are cut in `timezone`."""
        return self.logs.type_of(self.time).startswith(ZONED)

    @property
    def label_type(self) -> str | None:
        if self.label is None:
            return None
        return (self.labels or self.logs).type_of(self.label)

    @property
    def values(self) -> dict:
        """The values the role SQL binds ($classes, $timezone, $unlabelled_value)."""
        return {
            "classes": self.classes_text,
            "timezone": self.timezone,
            "unlabelled_value": self.unlabelled,
        }


def column_roles(texts: dict, sources: dict, reserved: set) -> ColumnRoles:
    """Check the column-role parameters against the logs (and labels) schema.

    `timezone` is taken as given: check it first with `time_zone(con, text)`."""
    logs, labels = sources["logs"], sources.get("labels")
    _all_found(texts, logs, labels)
    time = logs.column(texts["time_col"], "time_col")
    scores = logs.column(texts["scores_col"], "scores_col")
    version = logs.column(texts["version_col"], "version_col")
    segments = tuple(logs.column(c, "segment_cols") for c in split_names(texts["segment_cols"]))
    kind = texts["scores_kind"]
    _check_type(logs, time, "time_col", TIME_TYPES, "a DATE or TIMESTAMP column")
    if is_binary(kind):
        _check_type(
            logs,
            scores,
            "scores_col",
            SCORE_TYPES,
            f"a single number per row for scores_kind={kind}",
        )
    elif not (
        logs.type_of(scores).endswith("]")
        and "[" not in (element := logs.type_of(scores).rsplit("[", 1)[0])  # not nested
        and element.startswith(SCORE_TYPES)
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
        label_id = labels.column(texts["id_col"], "id_col")
        a, b = logs.type_of(id_col), labels.type_of(label_id)
        if _is_number(a) != _is_number(b):
            raise DbmetricsError(
                f"id_col: `{id_col}` is {a} in logs but `{label_id}` is {b} in labels, so no "
                "id can match; store both as numbers or both as text (or cast one in a view)"
            )
    label_source = labels or logs
    if labels is not None and not texts["label_col"]:
        raise DbmetricsError(
            "label_col: labels come from a separate table, so label_col must name its label column"
        )
    label = label_source.column(texts["label_col"], "label_col") if texts["label_col"] else None
    label_type = label_source.type_of(label) if label is not None else None
    if label is not None and not texts["classes"] and not _is_number(label_type):
        raise DbmetricsError(
            f"label_col: column `{label}` is {label_type}; "
            "labels must be 0-based class indices (integers, or whole numbers in a "
            "FLOAT/DOUBLE column), or names with classes=NAME0,NAME1,... in class-index order"
        )
    unlabelled = texts.get("unlabelled_value")
    if unlabelled is not None and label is not None and _is_number(label_type):
        try:
            if not math.isfinite(float(unlabelled)):
                raise ValueError
        except ValueError:
            raise DbmetricsError(
                f"unlabelled_value: `{unlabelled}` is not a number, but label_col `{label}` "
                f"is {label_type}; give the number that marks a row not labelled yet, e.g. -1"
            ) from None
    keys = [version, *segments]
    clashes = sorted({k for k in keys if k.lower() in reserved or keys.count(k) > 1})
    if clashes:
        raise DbmetricsError(
            f"version_col/segment_cols: `{', '.join(clashes)}` is used twice "
            "or clashes with a computed column name; rename it in a view"
        )
    return ColumnRoles(
        logs,
        time,
        scores,
        kind,
        version,
        segments,
        label,
        labels,
        id_col,
        bool(texts["classes"]),
        texts.get("timezone") or DEFAULTS["timezone"],
        unlabelled,
        texts["classes"],
    )


# role -> (where it is looked up, the column types that could play it)
CANDIDATES = {
    "time_col": ("logs", lambda t: t.startswith(TIME_TYPES)),
    "scores_col": ("logs", lambda t: t.endswith("]") or _is_number(t)),
    "version_col": ("logs", lambda t: _is_key(t)),
    "segment_cols": ("logs", lambda t: _is_key(t)),
    "id_col": ("logs", lambda t: not t.endswith("]")),
    "label_col": ("labels", lambda t: _is_key(t) or _is_number(t)),
}


def _all_found(texts: dict, logs: Source, labels: Source | None) -> None:
    """Every column a role names exists; else one error naming every missing role with the
    columns of a fitting type that could play it (one missing role: the usual message)."""
    missing = []
    for role, (where, fits) in CANDIDATES.items():
        source = labels if where == "labels" and labels is not None else logs
        names = split_names(texts.get(role))
        for name in names:
            if source.find(name) is None:
                fitting = [c for c, t in source.columns.items() if fits(t)][:6]
                missing.append((role, name, source, fitting))
        if role == "id_col" and labels is not None:
            missing += [(role, n, labels, []) for n in names if labels.find(n) is None]
    if len(missing) == 1:
        role, name, source, _ = missing[0]
        source.column(name, role)  # raises the one-role message
    if missing:
        parts = "; ".join(
            f"{role} `{name}` not in {source.param}"
            + (f" (candidates: {', '.join(fitting)})" if fitting else "")
            for role, name, source, fitting in missing
        )
        raise DbmetricsError(
            f"{len(missing)} column roles name no column: {parts}; set each with "
            f"--set ROLE=COLUMN or in the project file's [params]; {logs.param} has: "
            f"{', '.join(logs.columns)}"
        )


def key_fragments(version: str, segments) -> dict:
    """The key placeholders of a query body, from the version and segment columns (own
    spellings), for logs and partials stores alike: version_col (quoted), segment_cols
    (`"a", "b"`), segments (comma-led, empty without segments) and segment_match
    (`cur."a" IS NOT DISTINCT FROM ref."a" AND ...`; `true` without segments).

    >>> key_fragments("v", ["a"])["segment_match"]
    'cur."a" IS NOT DISTINCT FROM ref."a"'
    """
    match = " AND ".join(f"cur.{quote(c)} IS NOT DISTINCT FROM ref.{quote(c)}" for c in segments)
    return {
        "version_col": quote(version),
        "segment_cols": ", ".join(quote(c) for c in segments),
        "segments": "".join(f", {quote(c)}" for c in segments),
        "segment_match": match or "true",
    }


def _is_key(kind: str) -> bool:
    """Text or a whole number: a type that can name a version, a segment or a class."""
    return not kind.endswith("]") and kind.startswith(("VARCHAR", *INTEGER_TYPES))


def _is_number(kind: str) -> bool:
    return not kind.endswith("]") and kind.startswith(NUMERIC_TYPES)


def time_zone(con: duckdb.DuckDBPyConnection, text: str | None) -> str:
    """The time zone `text` names (case as DuckDB spells it), or an error with close names."""
    text = (text or DEFAULTS["timezone"]).strip()
    names = [row[0] for row in con.execute("SELECT name FROM pg_timezone_names()").fetchall()]
    for name in names:
        if name.lower() == text.lower():
            return name
    close = difflib.get_close_matches(text, names, n=3, cutoff=0.6)
    hint = f"; did you mean {', '.join(close)}?" if close else ""
    raise DbmetricsError(
        f"timezone: `{text}` is not a time zone DuckDB knows (IANA names such as UTC, "
        f"Europe/Berlin, America/Los_Angeles){hint}"
    )


def day(roles: ColumnRoles, expr: str) -> str:
    """The day of the time expression: a TIMESTAMPTZ's local date in $timezone."""
    if roles.zoned:
        return f"CAST(timezone($timezone, {expr}) AS DATE)"
    return f"CAST({expr} AS DATE)"


def day_start(roles: ColumnRoles, expr: str) -> str:
    """A bound TIMESTAMP (midnight of a day) comparable with the time column."""
    if roles.zoned:
        return f"timezone($timezone, CAST({expr} AS TIMESTAMP))"
    return f"CAST({expr} AS TIMESTAMP)"


def _check_type(source: Source, col: str, role: str, prefixes: tuple, wanted: str) -> None:
    kind = source.type_of(col)
    if kind.endswith("]") or not kind.startswith(prefixes):
        raise DbmetricsError(f"{role}: column `{col}` is {source.type_of(col)}; expected {wanted}")


def class_index(roles: ColumnRoles, expr: str) -> str:
    """A label expression as a BIGINT class index: NULL when not labelled (NULL, NaN, or
    $unlabelled_value); -1 (a bad label) for an unknown class name or a number that is not
    a whole number or too large for BIGINT."""
    kind = roles.label_type or "BIGINT"
    fractional = not roles.classes and kind.startswith(FRACTIONAL_TYPES)
    number = f"CAST({expr} AS DOUBLE)" if fractional else expr
    # NaN by its text: DuckDB 2.0 folds isnan() to false from Parquet min/max statistics,
    # which leave NaN out
    nan = f" OR CAST({number} AS VARCHAR) IN ('nan', '-nan')" if fractional else ""
    missing = f"{expr} IS NULL{nan}"
    if roles.unlabelled is not None:
        missing += (
            f" OR CAST({expr} AS VARCHAR) = $unlabelled_value"
            if roles.classes or not _is_number(kind)
            else f" OR {number} = CAST($unlabelled_value AS DOUBLE)"
        )
    if roles.classes:
        index = (
            f"coalesce(list_position(list_transform(string_split($classes, ','), "
            f"lambda c: trim(c)), CAST({expr} AS VARCHAR)) - 1, -1)"
        )
    elif fractional:
        index = f"CASE WHEN {number} = floor({number}) THEN coalesce(TRY_CAST({number} AS BIGINT), -1) ELSE -1 END"
    else:  # a label too large for BIGINT is a bad label, not a failed query
        index = f"coalesce(TRY_CAST({expr} AS BIGINT), -1)"
    return f"CASE WHEN {missing} THEN NULL ELSE {index} END"
