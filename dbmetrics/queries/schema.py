"""Sources (a table/view name, or Parquet/CSV files) and their columns, read with DESCRIBE.

Identifiers reach SQL only double-quoted, spelled as the catalog or the file schema spells
them; paths reach SQL only as bound values.
"""

from dataclasses import dataclass, replace
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
    shadowed: tuple = ()  # partition keys (key=value folders) that are also file columns

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

    A path that exists (file or folder) is taken literally, glob characters and all; any
    other text is a glob pattern. A folder reads as `folder/**/*.parquet`. Parquet is read
    with union_by_name (files whose schemas drift still read; a missing column is NULL), and
    with hive_partitioning only when the layout is clearly hive-partitioned (`hive_keys`) and
    no partition key is also a column of the files; such keys are kept in `shadowed` and
    the file column is read.
    """
    table = _find_table(con, text)
    if table is not None:
        return described(con, param, table, {}, text)
    path = text
    try:
        given = Path(text).expanduser()
        is_folder = given.is_dir()
        literal = given.exists()
    except (RuntimeError, ValueError, OSError) as exc:
        raise DbmetricsError(f"{param}: `{text}` is not a usable path ({exc})") from None
    root = given if is_folder else given.parent if literal else _glob_root(text)
    if literal:
        path = glob_escape(str(given))
    if is_folder:
        path = path + "/**/*.parquet"
    if path.lower().endswith(CSV_SUFFIXES):
        return described(con, param, f"read_csv(${param}, auto_detect = true)", {param: path}, text)
    plain = f"read_parquet(${param}, union_by_name = true, hive_partitioning = false)"
    keys = _hive_keys(con, param, path, root)
    if not keys:
        return described(con, param, plain, {param: path}, text)
    files = described(con, param, plain, {param: path}, text)
    shadowed = tuple(k for k in keys if files.find(k) is not None)
    if shadowed:
        return replace(files, shadowed=shadowed)
    hive = f"read_parquet(${param}, union_by_name = true, hive_partitioning = true)"
    return described(con, param, hive, {param: path}, text)


def shadowing(key: str) -> str:
    """What a partition key that is also a file column means."""
    return (
        f"{key}=... folders in the path name a partition key that is also a column of the "
        f"files: the file column `{key}` is read, the folder value ignored (rename the folders "
        "to use it)"
    )


GLOB_CHARS = "*?["


def glob_escape(path: str) -> str:
    """A literal path as a DuckDB glob that matches only itself: each of * ? [ in a class.

    >>> glob_escape("logs/g*/day[1]")
    'logs/g[*]/day[[]1]'
    """
    return "".join(f"[{c}]" if c in GLOB_CHARS else c for c in path)


def _glob_root(pattern: str) -> Path:
    """The folder a glob pattern starts from: its path up to the first glob character."""
    head = pattern
    for c in GLOB_CHARS:
        head = head.split(c, 1)[0]
    return Path(head).expanduser() if head.endswith("/") else Path(head).expanduser().parent


def _hive_keys(con, param: str, pattern: str, root: Path) -> tuple:
    """The partition keys when every file lies below `root` in key=value folders only, the
    same keys in the same order for every file; else ()."""
    try:
        files = [r[0] for r in con.execute("SELECT file FROM glob(?)", [pattern]).fetchall()]
    except duckdb.Error:
        return ()
    layouts = set()
    for file in files:
        try:
            parts = Path(file).parent.relative_to(root).parts
        except ValueError:
            return ()
        if not parts or not all("=" in part and not part.startswith("=") for part in parts):
            return ()
        layouts.add(tuple(part.split("=", 1)[0] for part in parts))
    return layouts.pop() if len(layouts) == 1 else ()


def _find_table(con, text: str) -> str | None:
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


MESSAGE = 200  # characters of DuckDB's message kept


def is_parquet(source: Source) -> bool:
    """Files read by the saved queries' read_parquet (not a table, view or CSV)."""
    return bool(source.bound) and source.sql.startswith("read_parquet(")


def _file_list(con, source: Source) -> list:
    param = next(iter(source.bound))
    return [
        row[0]
        for row in con.execute(
            f"SELECT file FROM glob(${param}) ORDER BY file", source.bound
        ).fetchall()
    ]


def unreadable(con, source: Source) -> tuple | None:
    """(file, error) for the first file whose columns cannot all be decoded, else None."""
    for file in _file_list(con, source):
        try:
            con.execute(
                "SELECT count(COLUMNS(*)) FROM read_parquet(?)", [glob_escape(file)]
            ).fetchall()
        except duckdb.Error as exc:  # a decoder's message may quote garbage bytes
            text = "".join(c for c in first_line(exc) if c.isprintable())
            return file, text[:MESSAGE] + ("..." if len(text) > MESSAGE else "")
    return None
