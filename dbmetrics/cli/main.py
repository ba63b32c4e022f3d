"""The ``dbmetrics`` command group, its global options and its exit statuses.

Each command is a module of this package exposing ``command``; add it to the tuple at the end.
"""

from __future__ import annotations

import sys

import click
import duckdb

import dbmetrics
from dbmetrics import project
from dbmetrics.cli import check, demo, functions, partials, plot, queries, report, run, sql
from dbmetrics.cli.__main__ import EXIT_INTERRUPTED, interrupted
from dbmetrics.cli.messages import one_line
from dbmetrics.cli.session import Session, warnings_to_stderr
from dbmetrics.errors import DbmetricsError


class Group(click.Group):
    """Turns user-facing errors into one line on stderr (a traceback only with --verbose), and
    Ctrl-C at any moment (parsing, running, cleaning up) into status 130 and one line."""

    def main(self, *args, standalone_mode: bool = True, **kwargs):
        if not standalone_mode:
            return super().main(*args, standalone_mode=False, **kwargs)
        try:
            status = super().main(*args, standalone_mode=False, **kwargs)
        except click.exceptions.Abort as e:
            if isinstance(e.__cause__, KeyboardInterrupt):
                interrupted()
            click.echo("Aborted!", err=True)
            sys.exit(1)
        except click.ClickException as e:
            e.show()
            sys.exit(e.exit_code)
        except KeyboardInterrupt:
            interrupted()
        sys.exit(status if isinstance(status, int) else 0)

    def invoke(self, ctx: click.Context):
        try:
            return super().invoke(ctx)
        except (DbmetricsError, duckdb.Error, OSError) as e:
            if ctx.params.get("verbose"):
                raise
            raise click.ClickException(one_line(e)) from None
        except MemoryError:
            if ctx.params.get("verbose"):
                raise
            raise click.ClickException(
                "out of memory in Python (the arrays and result tables dbmetrics holds outside "
                "DuckDB, which --memory-limit does not bound); read fewer days or segments"
            ) from None
        except KeyboardInterrupt:
            click.echo("\ndbmetrics: interrupted", err=True)
            ctx.exit(EXIT_INTERRUPTED)


@click.group(cls=Group, context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(
    dbmetrics.__version__,
    "--version",
    package_name="dbmetrics",
    message="dbmetrics %(version)s",
    help="Show the version and exit.",
)
@click.option(
    "--project",
    "project_file",
    envvar="DBMETRICS_PROJECT",
    metavar="PATH",
    help="Project file (TOML) [env DBMETRICS_PROJECT; default ./dbmetrics.toml if present].",
)
@click.option(
    "--database",
    envvar="DBMETRICS_DATABASE",
    metavar="PATH",
    help="DuckDB database file to open, kept between runs [env DBMETRICS_DATABASE; default in memory].",
)
@click.option("--memory-limit", metavar="SIZE", help="DuckDB memory limit, e.g. 4GB.")
@click.option(
    "--threads",
    type=click.IntRange(min=1, max=project.MAX_THREADS),
    help=f"DuckDB worker threads (1 to {project.MAX_THREADS}).",
)
@click.option("--quiet", "-q", is_flag=True, help="No progress and no notes on stderr.")
@click.option(
    "--verbose", "-v", is_flag=True, help="Notes on stderr and full tracebacks on errors."
)
@click.pass_context
def cli(ctx, project_file, database, memory_limit, threads, quiet, verbose):
    """Measure classifiers from Parquet prediction logs with DuckDB.

    \b
    Example:
      dbmetrics demo demo_try && dbmetrics queries

    \b
    Exit status: 0 ok; 1 error (one line on stderr); 2 bad command line;
    3 flagged rows (--fail-on-flag); 4 problems found (check); 130 interrupted.
    Environment: DBMETRICS_PROJECT, DBMETRICS_DATABASE, and DBMETRICS_QUERY_PATH
    (extra saved-query folders, separated by the path separator).
    """
    if quiet and verbose:
        raise click.UsageError("--quiet and --verbose exclude each other")
    settings = project.load(project.find(project_file))
    session = Session(settings, database, memory_limit, threads, quiet, verbose)
    ctx.obj = session
    ctx.with_resource(warnings_to_stderr())
    ctx.call_on_close(session.close)


for _module in (run, queries, sql, demo, plot, report, check, partials, functions):
    cli.add_command(_module.command)
cli.add_command(functions.macros_command)
cli.add_command(functions.render_command)
