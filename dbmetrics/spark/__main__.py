"""``python -m dbmetrics.spark update``: `partials update` on Apache Spark, for spark-submit.

    spark-submit --master yarn "$(python -c 'import dbmetrics.spark.__main__ as m; print(m.__file__)')" \\
        update --store /shared/metrics_store --set logs=/lake/predictions --set timezone=UTC
"""

from __future__ import annotations

import datetime as dt
import json
import sys

import click

from dbmetrics.cli.params import parse_settings
from dbmetrics.errors import DbmetricsError


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
def cli():
    """Build or update a dbmetrics partials store on Apache Spark."""


@cli.command("update")
@click.option("--store", required=True, metavar="DIR", help="The store folder (created if absent).")
@click.option(
    "--set",
    "-s",
    "settings",
    multiple=True,
    metavar="PARAM=VALUE",
    help="A column-role parameter (logs, time_col, scores_col, ..., timezone); repeat for more.",
)
@click.option(
    "--relabel-days",
    type=click.IntRange(min=0, max=100_000),
    default=None,
    help="Bound the work: a day whose labels changed more than this many days before the "
    "newest new or changed day keeps its stored state and is reported as stale "
    "(default: recompute every changed day).",
)
@click.option(
    "--since",
    type=click.DateTime(formats=["%Y-%m-%d"]),
    metavar="YYYY-MM-DD",
    help="Also recompute every day from this one on, changed or not.",
)
@click.option("--full", is_flag=True, help="Recompute every day in the log.")
@click.option(
    "--drop-vanished",
    is_flag=True,
    help="Follow the logs where stored days lost rows (retention): drop or recompute them "
    "(default: keep their stored state, with a warning).",
)
@click.option(
    "--write-from",
    type=click.Choice(["auto", "driver", "workers"]),
    default="auto",
    show_default=True,
    help="Who writes the day files: the driver (small states) or the Spark tasks (large).",
)
def update_command(store, settings, relabel_days, since, full, drop_vanished, write_from):
    """Add new days to the store and recompute the days whose rows or labels changed, in
    one atomic step, with the work done by Spark.

    Takes the options of `dbmetrics partials update`; logs and labels are read by the Spark
    session (a table name or a path), and every worker needs dbmetrics installed. Prints
    warnings on stderr and the summary as one JSON line.
    """
    from pyspark.sql import SparkSession

    from dbmetrics.spark.job import update_store

    spark = SparkSession.builder.appName("dbmetrics partials update").getOrCreate()
    try:
        summary = update_store(
            spark,
            parse_settings(settings),
            store,
            since=since.date() if isinstance(since, dt.datetime) else None,
            relabel_days=relabel_days,
            full=full,
            drop_vanished=drop_vanished,
            write_from=write_from,
            warn=lambda message: click.echo(f"warning: {message}", err=True),
        )
    except DbmetricsError as exc:
        raise click.ClickException(str(exc).splitlines()[0]) from None
    click.echo(json.dumps(summary, sort_keys=False))


def main(argv=None) -> int:
    return cli.main(args=argv, prog_name="python -m dbmetrics.spark", standalone_mode=True)


if __name__ == "__main__":
    sys.exit(main())
