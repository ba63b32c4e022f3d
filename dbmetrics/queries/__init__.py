"""Saved queries: .sql files with a parameter header, found beside ours, rendered safely.

list_queries(query_dirs=None) -> list[QueryInfo]
scan_queries(query_dirs=None) -> (list[QueryInfo], list[BrokenQuery])
get_query(name, query_dirs=None) -> QueryInfo
render_query(con, name, params, query_dirs=None) -> (sql, bound)
run_query(con, name, params, query_dirs=None, project=None) -> pyarrow.Table
"""

from .catalog import BrokenQuery, get_query, list_queries, scan_queries
from .execute import run_query
from .header import Param, QueryInfo
from .render import render_query

__all__ = [
    "BrokenQuery",
    "Param",
    "QueryInfo",
    "get_query",
    "list_queries",
    "render_query",
    "run_query",
    "scan_queries",
]
