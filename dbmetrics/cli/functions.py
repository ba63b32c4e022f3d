"""``dbmetrics functions``: the catalogue of SQL functions; ``dbmetrics macros``: the SQL
pack; ``dbmetrics render``: a saved query as plain SQL for any DuckDB client."""

from __future__ import annotations

import click
import pyarrow as pa

from dbmetrics.cli.params import merge, parse_settings, settings_option
from dbmetrics.cli.textable import render


@click.command("functions")
@click.argument("name", required=False)
@click.option(
    "--markdown", is_flag=True, help="Print the catalogue as the README's Markdown table."
)
def command(name, markdown):
    """List the SQL functions dbmetrics adds to DuckDB, or describe the function NAME.

    \b
    Example:
      dbmetrics functions && dbmetrics functions cross_entropy
    """
    from dbmetrics import functions

    if markdown:
        click.echo(functions.markdown_table(), nl=False)
        return
    if name is not None:
        try:
            fn = functions.get(name)
        except KeyError:
            known = ", ".join(f.name for f in functions.FUNCTIONS)
            raise click.BadParameter(f"no function {name!r}; known: {known}") from None
        implementation = {"macro": "SQL macro", "udf": "Python UDF"}[functions.chosen(fn)]
        click.echo(
            f"{fn.signature} -> {functions.type_name(fn.returns)}\n"
            f"  {fn.description}\n"
            + "".join(f"  takes: {functions.TAGS[t]}\n" for t in fn.takes)
            + f"  example: SELECT {fn.example}\n"
            f"  implementation by default: {implementation}\n"
        )
        return
    table = pa.table(
        {
            "function": [f.signature for f in functions.FUNCTIONS],
            "tags": [", ".join(f.takes) for f in functions.FUNCTIONS],
            "description": [f.description for f in functions.FUNCTIONS],
        }
    )
    click.echo(render(table, count=False, width=None), nl=False)


@click.command("macros")
@click.option(
    "--output",
    "-o",
    metavar="PATH",
    help="Write the pack to PATH instead of printing it.",
)
def macros_command(output):
    """Print (or write) the SQL macro pack: every function as a DuckDB macro, for any client.

    \b
    Example:
      dbmetrics macros --output dbmetrics_macros.sql
    """
    from dbmetrics import macros
    from dbmetrics.atomic import atomic_write

    text = macros.pack_text()
    if output is None:
        click.echo(text, nl=False)
        return
    atomic_write(output, lambda f: f.write(text.encode("utf-8")))


@click.command("render")
@click.argument("name")
@settings_option()
@click.pass_obj
def render_command(session, name, settings):
    """Print the saved query NAME as plain SQL, its parameters written in as literals.

    The SQL runs in any DuckDB client that loaded the macro pack (`dbmetrics macros`);
    parameters are checked as for `dbmetrics run`.

    \b
    Example:
      dbmetrics render rollup --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet
    """
    from dbmetrics import queries
    from dbmetrics.queries.plain_sql import plain_sql

    dirs = session.query_dirs
    info = queries.get_query(name, query_dirs=dirs)
    params = merge(name, [p.name for p in info.params], session.project, parse_settings(settings))
    click.echo(plain_sql(session.connect(), name, params, query_dirs=dirs), nl=False)
