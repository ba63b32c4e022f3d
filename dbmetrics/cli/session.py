"""What every command shares: settings from options, environment and project file, and the connection.

Precedence: command-line option, then environment variable, then project file, then default.
"""

from __future__ import annotations

import contextlib
import sys
import warnings
from collections.abc import Callable, Iterator
from dataclasses import dataclass
from typing import TypeVar

import click
import duckdb

import dbmetrics
from dbmetrics.cli import progress
from dbmetrics.cli.messages import one_line
from dbmetrics.errors import DbmetricsError, DbmetricsWarning
from dbmetrics.project import Project

T = TypeVar("T")


@dataclass
class Session:
    """Global options resolved once per invocation; holds the connection when opened."""

    project: Project
    database: str | None = None
    memory_limit: str | None = None
    threads: int | None = None
    quiet: bool = False
    verbose: bool = False
    _con: duckdb.DuckDBPyConnection | None = None

    @property
    def query_dirs(self) -> list[str]:
        """The project's query folders (the saved queries add ``DBMETRICS_QUERY_PATH`` themselves)."""
        return list(self.project.query_dirs)

    @property
    def show_progress(self) -> bool:
        return not self.quiet and sys.stderr.isatty()

    def connect(self) -> duckdb.DuckDBPyConnection:
        """The connection, opened on first use with every dbmetrics function registered."""
        if self._con is None:
            database = self.database or self.project.database or ":memory:"
            config = {}
            memory_limit = self.memory_limit or self.project.memory_limit
            threads = self.threads or self.project.threads
            if memory_limit:
                config["memory_limit"] = memory_limit
            if threads:
                config["threads"] = threads
            self.info(f"database: {database}" + "".join(f", {k}={v}" for k, v in config.items()))
            if memory_limit:
                self.check_memory_limit(memory_limit)
            self._con = dbmetrics.connect(database, **config)
            if self.show_progress:
                progress.enable(self._con)
            else:  # DuckDB's own bar would print to stdout, into a piped table or CSV
                self._con.execute("SET enable_progress_bar_print = false")
        return self._con

    def check_memory_limit(self, value: str) -> None:
        """A size DuckDB cannot read is an error naming where it was given."""
        where = "--memory-limit" if self.memory_limit else f"memory_limit in {self.project.path}"
        try:
            duckdb.connect(":memory:", config={"memory_limit": str(value)}).close()
        except duckdb.Error as exc:
            raise DbmetricsError(
                f"{where}: `{value}` is not a memory size such as 4GB, 500MB or 80% "
                f"({one_line(exc)})"
            ) from None

    def execute(self, call: Callable[[duckdb.DuckDBPyConnection], T]) -> T:
        """``call(con)`` with progress on a terminal and Ctrl-C interrupting the query."""
        con = self.connect()
        return progress.run(con, lambda: call(con), sys.stderr if self.show_progress else None)

    def close(self) -> None:
        if self._con is not None:
            self._con.close()
            self._con = None

    def info(self, message: str) -> None:
        """A note on stderr under ``--verbose``."""
        if self.verbose:
            click.echo(message, err=True)

    def note(self, message: str) -> None:
        """A note on stderr unless ``--quiet``."""
        if not self.quiet:
            click.echo(message, err=True)


@contextlib.contextmanager
def warnings_to_stderr() -> Iterator[None]:
    """Within: each DbmetricsWarning is one line on stderr, every time it is issued (even
    under --quiet: a warning is about the numbers, not the progress); other warnings as usual."""
    with warnings.catch_warnings():
        shown = warnings.showwarning

        def show(message, category, filename, lineno, file=None, line=None):
            if issubclass(category, DbmetricsWarning):
                click.echo(f"dbmetrics: warning: {' '.join(str(message).split())}", err=True)
            else:
                shown(message, category, filename, lineno, file, line)

        warnings.simplefilter("always", DbmetricsWarning)
        warnings.showwarning = show
        yield
