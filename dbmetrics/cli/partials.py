"""``dbmetrics partials``: keep a store of per-day additive states up to date."""

from __future__ import annotations

import datetime as dt

import click
import pyarrow as pa

from dbmetrics.cli.params import merge, parse_settings
from dbmetrics.cli.results import emit


@click.group("partials")
def command():
    """Summarise logs once per day into a store; queries then roll up the store.

    Build or refresh a store with `partials update`, then run any query with
    `--set partials=STORE` (e.g. `dbmetrics run rollup --set partials=metrics_store`).

    \b
    Example:
      dbmetrics partials update --store metrics_store --set logs=demo_parquet/logs \\
          --set segment_cols=region,channel --set label_col=
    """


@command.command("update")
@click.option("--store", required=True, metavar="DIR", help="The store folder (created if absent).")
@click.option(
    "--set",
    "-s",
    "settings",
    multiple=True,
    metavar="PARAM=VALUE",
    help="A column-role parameter (logs, time_col, scores_col, ...); repeat for more.",
)
@click.option(
    "--relabel-days",
    type=click.IntRange(min=0),
    default=14,
    show_default=True,
    help="Recompute this many of the latest stored days, whose labels may have arrived since.",
)
@click.option(
    "--since",
    type=click.DateTime(formats=["%Y-%m-%d"]),
    metavar="YYYY-MM-DD",
    help="Recompute every day from this one on (instead of --relabel-days).",
)
@click.option("--full", is_flag=True, help="Recompute every day in the log.")
@click.pass_context
def update_command(ctx, store, settings, relabel_days, since, full):
    """Add new days to the store and refresh recent ones, in one atomic step.

    Only the recomputed days are read from the logs (the time filter reaches the
    Parquet scan); an interrupted update leaves the previous store intact.

    \b
    Example:
      dbmetrics partials update --store metrics_store --set logs=demo_parquet/logs \\
          --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id
    """
    from dbmetrics import partials, queries
    from dbmetrics.queries.header import COLUMN_MAP

    session = ctx.obj
    declared = [p.name for p in queries.get_query("rollup").params]
    merged = merge("rollup", declared, session.project, parse_settings(settings))
    params = {k: v for k, v in merged.items() if k in COLUMN_MAP}
    day = since.date() if isinstance(since, dt.datetime) else None
    summary = session.execute(
        lambda con: partials.update(
            con, params, store, since=day, relabel_days=relabel_days, full=full
        )
    )
    ctx.exit(emit(session, pa.Table.from_pylist([summary]), None, None, None))


@command.command("show")
@click.option("--store", required=True, metavar="DIR", help="The store folder.")
@click.pass_context
def show_command(ctx, store):
    """Show a store's column roles and the days it holds.

    \b
    Example:
      dbmetrics partials show --store metrics_store
    """
    from dbmetrics import partials

    summary = partials.describe(store)
    ctx.exit(
        emit(
            ctx.obj,
            pa.Table.from_pylist([{k: str(v) for k, v in summary.items()}]),
            None,
            None,
            None,
        )
    )
