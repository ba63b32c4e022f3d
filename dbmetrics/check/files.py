"""Parquet file sources, file by file: each file's own schema (drift between files). Only
footers are read. (Finding the file that makes a scan fail is queries.schema.unreadable.)"""

from collections import defaultdict
from dataclasses import dataclass

from dbmetrics.queries.schema import Source


@dataclass(frozen=True)
class Drift:
    """A column whose presence or type is not the same in every file."""

    column: str
    role: str | None
    detail: str
    problem: bool


def schemas(con, source: Source) -> dict:
    """file -> {column: DuckDB type} for the top-level columns of each file."""
    param = next(iter(source.bound))
    rows = con.execute(
        f"SELECT file_name, name, num_children, duckdb_type FROM parquet_schema(${param})",
        source.bound,
    ).fetchall()
    by_file = defaultdict(list)
    for file, name, children, kind in rows:
        by_file[file].append((name, children or 0, kind))
    return {file: _top_level(nodes) for file, nodes in by_file.items()}


def _top_level(nodes: list) -> dict:
    """The root's children from a depth-first (name, num_children, type) list."""

    def skip(pos):  # the position after the subtree at pos
        end = pos + 1
        for _ in range(nodes[pos][1]):
            end = skip(end)
        return end

    columns, pos = {}, 1
    for _ in range(nodes[0][1]):
        columns[nodes[pos][0]] = nodes[pos][2]
        pos = skip(pos)
    return columns


def drift(con, source: Source, roles: dict) -> list:
    """Columns absent from some files (read as NULL: a problem for a column the map uses)
    or typed differently between files (read as the common type: information)."""
    per_file = schemas(con, source)
    found = []
    for column in source.columns:
        kinds = defaultdict(list)
        for file, columns in per_file.items():
            kinds[columns.get(column)].append(file)
        role = roles.get(column)
        absent = kinds.pop(None, [])
        if len(per_file) and len(absent) == len(per_file):
            continue  # not a file column (a hive partition key)
        if absent:
            found.append(
                Drift(
                    column,
                    role,
                    f"absent from {len(absent)} of {len(per_file)} "
                    f"files (read as NULL), e.g. {absent[0]}",
                    role is not None,
                )
            )
        if len(kinds) > 1:
            seen = ", ".join(
                f"{kind} in {len(files)} file{'s' * (len(files) > 1)} (e.g. {files[0]})"
                for kind, files in sorted(kinds.items())
            )
            found.append(
                Drift(
                    column, role, f"types differ: {seen}; read as {source.columns[column]}", False
                )
            )
    return found
