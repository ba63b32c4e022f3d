"""Saved queries: .sql files with a parameter header, found beside ours, rendered safely.

list_queries(query_dirs=None) -> list[QueryInfo]
scan_queries(query_dirs=None) -> (list[QueryInfo], list[BrokenQuery])
get_query(name, query_dirs=None) -> QueryInfo
render_query(con, name, params, query_dirs=None) -> (sql, bound)
run_query(con, name, params, query_dirs=None, project=None, periods=None) -> pyarrow.Table
periods(since=None, until=None, last=None) -> Periods (the periods run_query keeps)
"""

from .catalog import BrokenQuery, get_query, list_queries, scan_queries
from .execute import run_query
from .header import Param, QueryInfo
from .periods import Periods, periods
from .render import render_query

__all__ = [
    "BrokenQuery",
    "Param",
    "Periods",
    "QueryInfo",
    "get_query",
    "list_queries",
    "periods",
    "render_query",
    "run_query",
    "scan_queries",
]
