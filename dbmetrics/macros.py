"""The SQL macro pack: dbmetrics' functions as plain DuckDB macros, for any DuckDB client.

The pack is `sql/macros/dbmetrics_macros.sql` (shipped in the wheel as
dbmetrics/sql/macros/). Loading it is one statement in any client; from Python,
`load_macros(con)`. Public macros carry the catalogue's names (functions.FUNCTIONS); helpers
start with `dbmetrics_`.
"""

import re
from pathlib import Path

import duckdb

from dbmetrics.queries.catalog import BUILT_IN

PACK = BUILT_IN / "macros" / "dbmetrics_macros.sql"
HELPER_PREFIX = "dbmetrics_"
_DEFINED = re.compile(r"^CREATE OR REPLACE MACRO (\w+)\(", re.M)


def pack_text(path: Path = PACK) -> str:
    """The pack's SQL text."""
    return path.read_text(encoding="utf-8")


def macro_names(text: str | None = None) -> list:
    """Every macro the pack defines, in file order (helpers included)."""
    return _DEFINED.findall(pack_text() if text is None else text)


def public_names(text: str | None = None) -> list:
    """The pack's functions under catalogue names (helpers left out)."""
    return [n for n in macro_names(text) if not n.startswith(HELPER_PREFIX)]


def load_macros(con: duckdb.DuckDBPyConnection) -> duckdb.DuckDBPyConnection:
    """Create (or replace) every macro of the pack on `con`."""
    con.execute(pack_text())
    return con
