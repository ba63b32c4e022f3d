"""``dbmetrics sql``: ad-hoc SQL with the dbmetrics functions registered."""

from __future__ import annotations

import sys

import click
import duckdb
import pyarrow as pa

from dbmetrics.cli.results import emit, output_options


@click.command("sql")
@click.argument("query", required=False, metavar="[SQL|-]")
@click.option("--file", "sql_file", metavar="PATH", help="Read the SQL from this file.")
@output_options
@click.pass_context
def command(ctx, query, sql_file, fmt, output, flag_column, pick, all_columns):
    """Run SQL (an argument, --file PATH, or - for stdin) and print or write the last result.

    \b
    Example:
      dbmetrics sql "SELECT softmax([1.0, 2.0, 3.0]) AS p, cross_entropy([1.0, 2.0, 3.0], 2) AS loss"
    """
    if (query is None) == (sql_file is None):
        raise click.UsageError(
            "give the SQL either as an argument (- for stdin) or with --file PATH"
        )
    if sql_file is not None:
        with open(sql_file, encoding="utf-8") as f:
            query = f.read()
    elif query == "-":
        query = sys.stdin.read()
    session = ctx.obj
    session.info(query)
    table = session.execute(lambda con: _fetch(con, query))
    if table is None:
        if output:
            session.note(f"the last statement returns no rows; {output} not written")
        ctx.exit(0)
    ctx.exit(emit(session, table, fmt, output, flag_column, pick, all_columns))


def _fetch(con, query: str) -> pa.Table | None:
    """Run every statement; the last one's rows, or None when it is a statement that returns
    none (CREATE, DROP, SET, ...: DuckDB answers those with an empty `Count` or `Success`
    table, which is not a result). INSERT, UPDATE and DELETE keep their row count."""
    relation = con.sql(query)
    if relation is None:
        return None
    table = relation.to_arrow_table()
    statements = duckdb.extract_statements(query)
    if (
        table.num_rows == 0
        and statements
        and duckdb.ExpectedResultType.NOTHING in statements[-1].expected_result_type
    ):
        return None
    return table
