"""``dbmetrics partials``: keep a store of per-day additive states up to date."""

from __future__ import annotations

import datetime as dt

import click
import pyarrow as pa

from dbmetrics.cli.params import merge, parse_settings, settings_option
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


_UPDATE_OPTIONS = (
    click.option(
        "--store", required=True, metavar="DIR", help="The store folder (created if absent)."
    ),
    settings_option(
        "A column-role parameter (logs, time_col, scores_col, ...); repeat for more. "
        "An existing store reuses the ones it was built with."
    ),
    click.option(
        "--relabel-days",
        type=click.IntRange(min=0, max=100_000),
        default=None,
        help="Bound the work: a day whose labels changed more than this many days before the "
        "newest new or changed day keeps its stored state and is reported as stale "
        "(default: recompute every changed day).",
    ),
    click.option(
        "--since",
        type=click.DateTime(formats=["%Y-%m-%d"]),
        metavar="YYYY-MM-DD",
        help="Also recompute every day from this one on, changed or not.",
    ),
    click.option("--full", is_flag=True, help="Recompute every day in the log."),
    click.option(
        "--drop-vanished",
        is_flag=True,
        help="Follow the logs where stored days lost rows (retention): drop or recompute them "
        "(default: keep their stored state, with a warning).",
    ),
)


def update_options(function):
    """The options of a store update, shared by `partials update` and the Spark entry point
    (same names, ranges and messages)."""
    for option in reversed(_UPDATE_OPTIONS):
        function = option(function)
    return function


@command.command("update")
@update_options
@click.pass_context
def update_command(ctx, store, settings, relabel_days, since, full, drop_vanished):
    """Add new days to the store and recompute the days whose rows or labels changed, in
    one atomic step.

    Each day's rows and labels are fingerprinted (time, id and label columns only, not the
    scores); only changed days are read in full. One update runs at a time (a lock file);
    an interrupted update leaves the previous store intact.

    \b
    Example:
      dbmetrics partials update --store metrics_store --set logs=demo_parquet/logs \\
          --set labels=demo_parquet/labels/labels.parquet --set id_col=prediction_id
      dbmetrics partials update --store metrics_store
    """
    from dbmetrics import partials
    from dbmetrics.partials.update import KNOWN
    from dbmetrics.queries.header import column_role_params

    session = ctx.obj
    declared = [p.name for p in column_role_params()]  # as the project's [params] give them
    given = parse_settings(settings)
    merged = merge("partials", declared, session.project, given)
    params = {k: v for k, v in merged.items() if k in KNOWN or k in given}
    day = since.date() if isinstance(since, dt.datetime) else None
    job = partials.Update(
        store,
        params,
        since=day,
        relabel_days=relabel_days,
        full=full,
        drop_vanished=drop_vanished,
        warn=lambda message: click.echo(f"warning: {message}", err=True),
        waiting=session.note,
    )
    with job:
        session.execute(job.compute)  # reading the logs: Ctrl-C interrupts DuckDB
        summary = job.publish()  # in this thread: Ctrl-C stops it before the manifest swap
    ctx.exit(emit(session, pa.Table.from_pylist([summary]), None, None, None))


@command.command("show")
@click.option("--store", required=True, metavar="DIR", help="The store folder.")
@click.pass_context
def show_command(ctx, store):
    """Show a store's column roles, the days it holds, the days the last update left
    stale and any file the manifest lists that is missing (the next update recomputes it).

    \b
    Example:
      dbmetrics partials show --store metrics_store
    """
    from dbmetrics import partials

    summary = partials.describe(store)
    for problem in ("stale_days", "missing_files"):
        if summary[problem]:
            click.echo(f"warning: {problem.replace('_', ' ')}: {summary[problem]}", err=True)
    ctx.exit(
        emit(
            ctx.obj,
            pa.Table.from_pylist([{k: None if v is None else str(v) for k, v in summary.items()}]),
            None,
            None,
            None,
        )
    )
