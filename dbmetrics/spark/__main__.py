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
from dbmetrics.cli.partials import update_options
from dbmetrics.errors import DbmetricsError


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
def cli():
    """Build or update a dbmetrics partials store on Apache Spark."""


@cli.command("update")
@update_options
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
