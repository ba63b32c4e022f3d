"""The check's parameters: the saved queries' column roles (role_params.py) plus a few of
its own, checked with the saved queries' own code (defaults, values, sources, column roles)."""

from dataclasses import dataclass
from pathlib import Path

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries.header import QueryInfo, column_role_params, parse_param
from dbmetrics.queries.roles import NUMERIC_TYPES, ColumnRoles, column_roles, time_zone
from dbmetrics.queries.schema import Source, open_source
from dbmetrics.queries.values import convert, with_defaults

# The saved queries' column roles and grain, but logs and id_col (the check's own words),
# segment_cols and bins (the check neither groups by segment nor bins).
SHARED = tuple(
    p.name for p in column_role_params() if p.name not in ("logs", "id_col", "segment_cols", "bins")
)
OWN = (
    "param logs (source, required): prediction log: a Parquet file, glob or "
    "(hive-partitioned) folder, or a table/view name",
    "param id_col (column): prediction id: with it, duplicate and NULL ids are counted "
    "(and labels are joined on it when labels is set)",
    "param target_col (column): soft targets (a numeric list per row): each must be a "
    "distribution of the scores' length",
    "param tolerance (number(0..1), default 0.001): a probability list (scores or soft "
    "target) must sum to 1 within this",
    "param require_labels (choice(no|yes), default no): yes counts NULL labels as a problem "
    "(by default they are rows not labelled yet)",
)
# Columns beside the version column in the check's inner queries; it may not take one.
RESERVED = {"day", "scores", "label", "s", "k", "score_issue", "label_issue"}


def info() -> QueryInfo:
    """The check's parameters, described like a saved query's."""
    shared = {p.name: p for p in column_role_params()}
    here = Path(__file__)
    own = [parse_param(text, here) for text in OWN]
    params = own[:1] + [shared[n] for n in SHARED] + own[1:]
    return QueryInfo(
        "check",
        "Health report of a prediction log",
        here,
        tuple(params),
        "dbmetrics check --set logs=demo_parquet/logs",
        "built-in",
    )


@dataclass(frozen=True)
class Resolved:
    """Checked parameters: texts as given, bound values, the column roles, extra columns."""

    texts: dict
    values: dict
    roles: ColumnRoles
    id_col: str | None
    target_col: str | None

    @property
    def logs(self) -> Source:
        return self.roles.logs


def resolve(con, params: dict) -> Resolved:
    """Defaults, value checks, sources and the column roles, as the saved queries do them."""
    query = info()
    texts = with_defaults(query, params)
    for p in query.params:  # empty text means "none": only label_col may be none
        if texts[p.name] is None and p.default is not None and p.name != "label_col":
            raise DbmetricsError(
                f"parameter `{p.name}` needs a value (its default is "
                f"{p.default}); leave it out to use the default"
            )
    values = {
        p.name: convert(p, texts[p.name])
        for p in query.params
        if p.kind not in ("source", "column", "columns")
    }
    sources = {
        name: open_source(con, name, texts[name])
        for name in ("logs", "labels")
        if texts[name] is not None
    }
    texts["timezone"] = time_zone(con, texts["timezone"])
    roles = column_roles({**texts, "segment_cols": None, "bins": None}, sources, RESERVED)
    values.update(roles.values)
    logs = sources["logs"]
    id_col = logs.column(texts["id_col"], "id_col") if texts["id_col"] else None
    target = logs.column(texts["target_col"], "target_col") if texts["target_col"] else None
    if target is not None and not _is_number_list(logs.type_of(target)):
        raise DbmetricsError(
            f"target_col: column `{target}` is {logs.type_of(target)}; "
            "expected a list of numbers (FLOAT[] or DOUBLE[])"
        )
    return Resolved(texts, values, roles, id_col, target)


def _is_number_list(kind: str) -> bool:
    return kind.endswith("]") and kind.rsplit("[", 1)[0].startswith(NUMERIC_TYPES)
