"""Run a saved query and return its result as an Arrow table."""

import duckdb
import pyarrow as pa

from dbmetrics.errors import DbmetricsError, warn
from dbmetrics.project import merge, open_project

from . import notes, score_kind
from .catalog import get_query
from .engine import VIEWS
from .periods import Periods, keep
from .render import rendered
from .roles import ColumnRoles
from .schema import first_line, is_parquet, open_source, shadowing, unreadable
from .values import split_names


def run_query(
    con: duckdb.DuckDBPyConnection,
    name: str,
    params: dict,
    query_dirs=None,
    project=None,
    periods: Periods | None = None,
) -> pa.Table:
    """Render `name` with `params`, execute, fetch as Arrow.

    params: text as from the CLI, or Python values (a list of names, a date, a number).
    project: a project file (path) or a dbmetrics.project.Project, as the CLI's --project:
    its query_dirs are searched too and its [params] / [queries.NAME] fill in what `params`
    does not give (dbmetrics.project.merge).
    periods: keep only these periods of the result (`periods.periods(since, until, last)`;
    see periods.py); a result without a `period` column is then an error. A query whose
    periods are independent of each other (periods.PER_PERIOD) reads only the logs' rows
    that can fall in them.

    STATE is computed first by the numpy engine and read from a registered table, which
    is dropped again afterwards. Scores that do not look like `scores_kind` says give a
    DbmetricsWarning (see score_kind.py), and so does an empty or meaningless result
    (notes.py).
    """
    if project is not None:
        settings = open_project(project)
        query_dirs = [*(query_dirs or []), *settings.query_dirs]
        declared = [p.name for p in get_query(name, query_dirs).params]
        params = merge(name, declared, settings, params)
    try:
        r = rendered(
            con, name, params, query_dirs, materialize=True, inspect=_check_scores, periods=periods
        )
        table = con.sql(r.sql, params=r.bound).to_arrow_table()
    except duckdb.Error as exc:
        raise DbmetricsError(f"query `{name}` failed: {_explain(con, params, exc)}") from exc
    finally:
        registered = {row[0] for row in con.sql("SELECT view_name FROM duckdb_views()").fetchall()}
        for view in set(VIEWS.values()) & registered:
            con.unregister(view)
    repeated = sorted({c for c in table.column_names if table.column_names.count(c) > 1})
    if repeated:
        raise DbmetricsError(
            f"query `{name}` returns column(s) {', '.join(repeated)} twice "
            "(an input column shares a computed column's name); rename it "
            "in a view"
        )
    if periods is not None:
        table = keep(table, periods, r.texts.get("grain"), name)
    for message in notes.result_notes(name, r.texts, table):
        warn(message)
    return table


def _check_scores(con, roles: ColumnRoles) -> None:
    """From a sample of the scores: an error when `classes` names another number of classes
    than K, a warning when the scores contradict scores_kind."""
    logs = roles.logs
    for key in logs.shadowed:
        warn(f"logs: {shadowing(key)}")
    found = score_kind.sample(con, logs.sql, roles.scores, roles.kind, logs.bound)
    if roles.classes:
        wrong = score_kind.classes_mismatch(split_names(roles.classes_text), found, roles.scores)
        if wrong:
            raise DbmetricsError(wrong)
    message = score_kind.mismatch(roles.kind, found.shapes)
    if message:
        warn(message)


def _explain(con, params: dict, exc: duckdb.Error) -> str:
    """DuckDB's first line, and for a Parquet log that cannot be decoded, which file."""
    text = "".join(c for c in first_line(exc) if c.isprintable())
    if isinstance(exc, duckdb.OutOfMemoryException):  # no file is to blame
        return f"{text}; raise the memory limit (--memory-limit) or read fewer days"
    logs = params.get("logs")
    if logs:
        try:
            source = open_source(con, "logs", logs)
            found = unreadable(con, source) if is_parquet(source) else None
        except (DbmetricsError, duckdb.Error):
            found = None
        if found:
            return f"cannot read {found[0]}: {found[1]}"
    return text
