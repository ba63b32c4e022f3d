"""``dbmetrics run NAME``: run a saved query with parameters and write its result."""

from __future__ import annotations

import click

from dbmetrics.cli.params import merge, parse_settings, settings_option
from dbmetrics.cli.results import emit, key_columns, output_options


@click.command("run")
@click.argument("name")
@settings_option()
@click.option(
    "--since", metavar="DATE", help="Keep the periods whose first day is on or after DATE."
)
@click.option(
    "--until", metavar="DATE", help="Keep the periods whose first day is on or before DATE."
)
@click.option(
    "--last",
    metavar="N",
    help="Keep the N periods ending with the one holding --until (default: the latest).",
)
@output_options
@click.pass_context
def command(ctx, name, settings, since, until, last, fmt, output, flag_column, pick, all_columns):
    """Run the saved query NAME and print or write its result.

    Parameters come from --set, then the project file ([queries.NAME], then
    [params]), then the query's defaults; `dbmetrics queries NAME` lists them.
    --since, --until and --last (dates YYYY-MM-DD, a count) keep some periods of the
    result, also for --fail-on-flag; drift's reference window is not cut.

    \b
    Example:
      dbmetrics run drift --set logs=demo_parquet/logs --set id_col=prediction_id \\
          --set labels=demo_parquet/labels/labels.parquet --output drift.csv --fail-on-flag
    """
    from dbmetrics import queries

    session = ctx.obj
    chosen = queries.periods(since, until, last)
    cli_params = parse_settings(settings)
    dirs = session.query_dirs
    info = queries.get_query(name, query_dirs=dirs)
    params = merge(name, [p.name for p in info.params], session.project, cli_params)
    if session.verbose:
        sql, bound = queries.render_query(session.connect(), name, params, query_dirs=dirs)
        session.info(f"-- {info.path}\n{sql}\n-- bound: {bound}")
    table = session.execute(
        lambda con: queries.run_query(con, name, params, query_dirs=dirs, periods=chosen)
    )
    key = key_columns(info, params)
    ctx.exit(emit(session, table, fmt, output, flag_column, pick, all_columns, key))
