"""Render a saved query: check every parameter, fill {{placeholders}}, collect bound values.

Identifiers come from the schema (quoted); every other value is bound as `$name`. No
parameter text is ever pasted into SQL.
"""

import re
from dataclasses import dataclass

import duckdb

from dbmetrics.errors import DbmetricsError

from . import pairs
from .catalog import get_query
from .engine import CLASS_KINDS, engine_pays, materialized_states, sampled_classes
from .header import COLUMN_MAP, PLACEHOLDER, QueryInfo, bound_values
from .periods import Periods, scan_window, within
from .role_params import REQUIRED_ROLES
from .roles import ColumnRoles, column_roles, time_zone
from .schema import open_source, quote
from .state_sql import (
    CLASS_STATE_COLUMNS,
    INTERNAL,
    STATE_COLUMNS,
    empty_binary_state,
    fragments,
)
from .store_sql import store_fragments
from .values import convert, split_names, with_defaults

ALIAS = re.compile(r"\bAS\s+([a-z_][a-z0-9_]*)\b")  # lower-case aliases; SQL types are upper-case


@dataclass(frozen=True)
class Rendered:
    """A rendered query: its SQL, the bound values, the parameter texts after defaults, and
    the column roles checked against the logs (None for a query without them or on a store)."""

    info: QueryInfo
    sql: str
    bound: dict
    texts: dict
    roles: ColumnRoles | None


def render_query(
    con: duckdb.DuckDBPyConnection,
    name: str,
    params: dict,
    query_dirs=None,
    materialize: bool = False,
    sql_state: bool = False,
) -> tuple:
    """(sql, bound): the query's SQL and the values for exactly the `$names` it uses.
    sql_state: {{state}} from logits by DuckDB's SQL alone (state_sql.sql_row_stats)."""
    r = rendered(con, name, params, query_dirs, materialize, sql_state=sql_state)
    return r.sql, r.bound


def rendered(
    con: duckdb.DuckDBPyConnection,
    name: str,
    params: dict,
    query_dirs=None,
    materialize: bool = False,
    inspect=None,
    sql_state: bool = False,
    periods: Periods | None = None,
) -> Rendered:
    """The query rendered with `params`, with what a caller needs to judge its result.

    inspect(con, roles): called once the column roles are checked against the logs, before
    any state is computed (execute.py looks at a sample of the scores there).
    periods: the periods the caller keeps; a query whose periods are independent reads only
    the logs' rows that can fall in them (periods.scan_window)."""
    info = get_query(name, query_dirs)
    included = list(_included_queries(info, query_dirs).values())
    for inner in included:
        missing = [p.name for p in inner.params if p.name not in {q.name for q in info.params}]
        if missing:
            raise DbmetricsError(
                f"{info.path}: includes query `{inner.name}`, whose parameters "
                f"{', '.join(missing)} it does not declare"
            )
    return _render_info(
        con,
        info,
        params,
        {f"query:{q.name}": q for q in included},
        materialize,
        inspect,
        sql_state,
        periods,
    )


def _included_queries(info: QueryInfo, query_dirs=None, outer: tuple = ()) -> dict:
    """{name: QueryInfo} of every query `info` includes with {{query:NAME}}, directly or
    through another included query, innermost last (so they are filled in reverse)."""
    found = {}
    for placeholder in PLACEHOLDER.findall(info.body):
        if not placeholder.startswith("query:"):
            continue
        inner = get_query(placeholder[len("query:") :], query_dirs)
        if inner.name in (*outer, info.name):
            raise DbmetricsError(f"{info.path}: includes query `{inner.name}` within itself")
        found[inner.name] = inner
        found.update(_included_queries(inner, query_dirs, (*outer, info.name)))
    return found


def _render_info(
    con,
    info: QueryInfo,
    params: dict,
    included: dict,
    materialize: bool = False,
    inspect=None,
    sql_state: bool = False,
    periods: Periods | None = None,
) -> Rendered:
    """materialize: compute STATE now with the numpy engine (engine.py) and read it from a
    registered table; otherwise {{state}} is the equivalent SQL with one UDF call per row.
    periods: see `rendered`."""
    texts = with_defaults(info, params)
    values = {
        p.name: convert(p, texts[p.name])
        for p in info.params
        if p.kind not in ("source", "column", "columns")
    }
    sources = {
        p.name: open_source(con, p.name, texts[p.name])
        for p in info.params
        if p.kind == "source" and texts[p.name] is not None
    }
    filled, roles = {}, None
    if all(p in texts for p in REQUIRED_ROLES) and texts.get("partials") is not None:
        store_sql, store_values = store_fragments(texts, params)
        filled.update(store_sql)
        values.update(store_values)
        filled["rows_by_id"] = pairs.no_rows(filled)
        filled.update(
            {
                p.name: _checked_names(p, texts[p.name])
                for p in info.params
                if p.name in COLUMN_MAP and p.kind in ("column", "columns") and p.name not in filled
            }
        )
    elif all(p in texts for p in REQUIRED_ROLES):
        if texts["logs"] is None:
            raise DbmetricsError(
                f"query `{info.name}` needs parameter `logs` (the prediction "
                "log) or `partials` (a store of summarised days)"
            )
        queries = [info, *included.values()]
        reserved = (
            set(STATE_COLUMNS + CLASS_STATE_COLUMNS + INTERNAL)
            | {out.lower() for q in queries for out, _ in q.outputs}
            | {alias for q in queries for alias in ALIAS.findall(q.body)}
        )
        texts["timezone"] = time_zone(con, texts.get("timezone"))
        roles = column_roles(texts, sources, reserved)
        window = scan_window(info.name, periods, texts.get("grain"))
        if window is not None:
            roles = within(roles, *window)
            sources["logs"] = roles.logs
        values.update(roles.values)
        if inspect is not None:
            inspect(con, roles)
        filled.update(fragments(roles, sql_state))
        uses = {name for q in queries for name in PLACEHOLDER.findall(q.body)}
        bound = {k: v for s in sources.values() for k, v in s.bound.items()}
        if "binary_state" in uses and sampled_classes(con, roles, bound) != (2, 2):
            # the score histogram exists for two-class logs only (judged on the first rows)
            filled["binary_state"] = empty_binary_state(roles)
            uses.discard("binary_state")
        if "rows_by_id" in uses:
            ids = texts.get("id_col") and sources["logs"].column(texts["id_col"], "id_col")
            filled["rows_by_id"] = pairs.rows_by_id(roles, ids)
        kinds = tuple(k for k in CLASS_KINDS if k in uses)
        if (
            materialize
            and ("state" in uses or kinds)
            and engine_pays(con, roles, bound, bool(kinds))
        ):
            filled.update(materialized_states(con, roles, {**values, **bound}, kinds))
    for p in info.params:
        if p.kind == "source" and p.name in sources:
            filled[p.name] = sources[p.name].sql
            values.update(sources[p.name].bound)
        elif p.kind in ("column", "columns") and (p.name not in filled or p.sources):
            filled[p.name] = _checked_columns(p, texts[p.name], sources)
    for key, inner in reversed(included.items()):  # innermost first
        filled[key] = PLACEHOLDER.sub(
            lambda m, inner=inner: fill(m.group(1), filled, inner), inner.body
        )
    sql = PLACEHOLDER.sub(lambda m: fill(m.group(1), filled, info), info.body)
    return Rendered(info, sql, bound_values(sql, values), texts, roles)


def _checked_names(p, text) -> str:
    """Quoted column name(s) not checked against a schema (unused by a partials rollup)."""
    return ", ".join(quote(name) for name in split_names(text))


def _checked_columns(p, text, sources) -> str:
    """Quoted column name(s), each present in every source the type names (default logs)."""
    names = split_names(text)
    if p.kind == "column" and len(names) > 1:
        raise DbmetricsError(f"{p.name}: expects one column; got `{text}`")
    quoted = []
    for name in names:
        wanted = p.sources or ("logs",)
        if not all(s in sources for s in wanted):
            raise DbmetricsError(
                f"{p.name}: names columns of {', '.join(wanted)}; set that source parameter too"
            )
        quoted.append(quote([sources[s].column(name, p.name) for s in wanted][0]))
    return ", ".join(quoted)


def fill(name: str, filled: dict, info: QueryInfo) -> str:
    if name in filled and filled[name] is None and name != "predictions":
        raise DbmetricsError(
            f"query `{info.name}` needs the partials store's {{{{{name}}}}}, which some of its "
            "days lack (written by an earlier dbmetrics): run `dbmetrics partials update` "
            "on the store to add it"
        )
    if name in filled and filled[name] is None:
        raise DbmetricsError(
            f"query `{info.name}` reads individual predictions ({{{{{name}}}}}); "
            "a partials store keeps only sums: run it on logs"
        )
    if name not in filled:
        raise DbmetricsError(
            f"{info.path}: placeholder {{{{{name}}}}} has no value; set parameter `{name}`"
        )
    return filled[name]
