"""A saved query as plain SQL: bound values written in as literals, the state computed by the
functions of the SQL macro pack, so that any DuckDB client that loaded the pack can run it.

The state comes from DuckDB's SQL alone (state_sql.sql_row_stats for logits; the
row-statistics macro for probabilities), never from the numpy engine;
values still pass the query's parameter checks first, and each is written as a typed SQL
literal (strings quoted, quotes doubled), never pasted.
"""

import datetime as dt
import math

from dbmetrics.errors import DbmetricsError

from .header import BOUND, LITERALS
from .render import render_query


def literal(value) -> str:
    """A SQL literal for a bound value."""
    if value is None:
        return "NULL"
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return repr(value) if math.isfinite(value) else f"'{value!r}'::DOUBLE"
    if isinstance(value, dt.datetime):
        return f"TIMESTAMP '{value.isoformat(sep=' ')}'"
    if isinstance(value, dt.date):
        return f"DATE '{value.isoformat()}'"
    if isinstance(value, str):
        return "'" + value.replace("'", "''") + "'"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(literal(v) for v in value) + "]"
    raise DbmetricsError(f"cannot write a {type(value).__name__} value as SQL: {value!r}")


def inline(sql: str, bound: dict) -> str:
    """`sql` with each `$name` outside strings, quoted names and comments replaced."""
    out, last = [], 0
    for m in LITERALS.finditer(sql + "\n"):
        out.append(BOUND.sub(lambda b: literal(bound[b.group(1)]), sql[last : m.start()]))
        out.append(sql[m.start() : m.end()])
        last = m.end()
    out.append(BOUND.sub(lambda b: literal(bound[b.group(1)]), sql[last:]))
    return "".join(out).rstrip("\n")


def plain_sql(con, name: str, params: dict, query_dirs=None) -> str:
    """The saved query `name` with `params` as one self-contained SQL statement."""
    sql, bound = render_query(con, name, params, query_dirs, sql_state=True)
    return (
        f"-- dbmetrics saved query `{name}` as plain SQL; load the macro pack first\n"
        "-- (`dbmetrics macros --output dbmetrics_macros.sql`, then in the DuckDB shell\n"
        "-- `.read dbmetrics_macros.sql`).\n" + inline(sql, bound) + ";\n"
    )
