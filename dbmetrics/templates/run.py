"""Run a saved query and return its result as an Arrow table."""

import duckdb
import pyarrow as pa

from dbmetrics.errors import DbmetricsError

from .engine import STATE_VIEW
from .render import render_query
from .schema import first_line


def run_query(con: duckdb.DuckDBPyConnection, name: str, params: dict,
              query_dirs=None) -> pa.Table:
    """Render `name` with `params` (text values, as from the CLI), execute, fetch as Arrow.

    STATE is computed first by the numpy engine and read from a registered table, which
    is dropped again afterwards.
    """
    try:
        sql, bound = render_query(con, name, params, query_dirs, materialize=True)
        table = con.sql(sql, params=bound).to_arrow_table()
    except duckdb.Error as exc:
        raise DbmetricsError(f"query `{name}` failed: {first_line(exc)}") from exc
    finally:
        if con.sql(f"SELECT 1 FROM duckdb_views() WHERE view_name = '{STATE_VIEW}'").fetchall():
            con.unregister(STATE_VIEW)
    repeated = sorted({c for c in table.column_names if table.column_names.count(c) > 1})
    if repeated:
        raise DbmetricsError(f"query `{name}` returns column(s) {', '.join(repeated)} twice "
                             "(an input column shares a computed column's name); rename it "
                             "in a view")
    return table
