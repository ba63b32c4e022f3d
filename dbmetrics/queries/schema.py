"""Sources (a table/view name, or Parquet/CSV files) and their columns, read with DESCRIBE.

Identifiers reach SQL only double-quoted, spelled as the catalog or the file schema spells
them; paths reach SQL only as bound values.
"""

from dataclasses import dataclass
from pathlib import Path

import duckdb

from dbmetrics.errors import DbmetricsError

CSV_SUFFIXES = (".csv", ".csv.gz", ".tsv", ".tsv.gz")


def quote(name: str) -> str:
    """A DuckDB identifier, double-quoted: a"b -> "a""b"."""
    return '"' + name.replace('"', '""') + '"'


@dataclass(frozen=True)
class Source:
    """A FROM-able SQL fragment, the values it binds, and its columns (name -> type)."""

    param: str
    sql: str
    bound: dict
    columns: dict

    def find(self, name: str) -> str | None:
        """The column's own spelling (matched case-insensitively, as DuckDB does), or None."""
        for col in self.columns:
            if col.lower() == name.lower():
                return col
        return None

    def column(self, name: str, role: str) -> str:
        """The column's own spelling, or an error naming the role and the columns."""
        found = self.find(name)
        if found is not None:
            return found
        raise DbmetricsError(
            f"{role}: column `{name}` not found in {self.param}; columns are: "
            f"{', '.join(self.columns)}"
        )

    def type_of(self, name: str) -> str:
        return self.columns[name]


def open_source(con: duckdb.DuckDBPyConnection, param: str, text: str) -> Source:
    """`text` names a table or view in `con`, else Parquet file(s) or a CSV file.

    A folder reads as `folder/**/*.parquet`; Parquet is read with union_by_name (files whose
    schemas drift still read; a missing column is NULL) and hive_partitioning.
    """
    table = find_table(con, text)
    if table is not None:
        return described(con, param, table, {}, text)
    path = text
    try:
        folder = Path(text).expanduser()
        is_folder = folder.is_dir()
    except (RuntimeError, ValueError, OSError) as exc:
        raise DbmetricsError(f"{param}: `{text}` is not a usable path ({exc})") from None
    if is_folder:
        path = str(folder / "**" / "*.parquet")
    if path.lower().endswith(CSV_SUFFIXES):
        sql = f"read_csv(${param}, auto_detect = true)"
    else:
        sql = f"read_parquet(${param}, union_by_name = true, hive_partitioning = true)"
    return described(con, param, sql, {param: path}, text)


def find_table(con, text: str) -> str | None:
    """The quoted name of the table or view `text` (name or schema.name), if there is one."""
    rows = con.execute(
        "SELECT schema_name, table_name FROM duckdb_tables() "
        "UNION ALL SELECT schema_name, view_name FROM duckdb_views() WHERE NOT internal"
    ).fetchall()
    wanted = text.lower()
    for schema, name in rows:
        if wanted in (name.lower(), f"{schema}.{name}".lower()):
            return f"{quote(schema)}.{quote(name)}"
    return None


def described(con, param: str, sql: str, bound: dict, text: str) -> Source:
    try:
        rows = con.execute(f"DESCRIBE SELECT * FROM {sql}", bound).fetchall()
    except duckdb.IOException as exc:
        raise DbmetricsError(
            f"{param}: `{text}` is neither a table or view nor a readable file, "
            f"glob or folder of Parquet/CSV ({first_line(exc)})"
        ) from None
    except duckdb.Error as exc:
        raise DbmetricsError(f"{param}: cannot read `{text}`: {first_line(exc)}") from None
    return Source(param, sql, bound, {row[0]: row[1] for row in rows})


def first_line(exc: Exception) -> str:
    return str(exc).strip().splitlines()[0]
