"""Output options shared by ``run`` and ``sql``, and writing a result with them."""

from __future__ import annotations

import sys

import click
import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.cli.output import FORMATS, atomic_write, choose_format, encode
from dbmetrics.cli.session import Session
from dbmetrics.errors import DbmetricsError

EXIT_FLAGGED = 3


def output_options(command):
    """``--format``, ``--output`` and ``--fail-on-flag``."""
    command = click.option(
        "--fail-on-flag",
        "flag_column",
        is_flag=False,
        flag_value="flagged",
        default=None,
        metavar="[COLUMN]",
        help="After writing, exit with status 3 if any row is true in this BOOLEAN "
        "column (default column: flagged). Put it last or write --fail-on-flag=COLUMN.",
    )(command)
    command = click.option(
        "--output",
        "-o",
        metavar="PATH",
        help="Write to this file (atomically: the old file stays until the new one is complete).",
    )(command)
    command = click.option(
        "--format",
        "-f",
        "fmt",
        type=click.Choice(FORMATS),
        help="Output format; default: from the --output suffix, else table.",
    )(command)
    return command


def emit(
    session: Session, table: pa.Table, fmt: str | None, output: str | None, flag_column: str | None
) -> int:
    """Write ``table`` to ``output`` or stdout; the exit status (3 if flagged rows)."""
    fmt = choose_format(fmt, output)
    flagged = flagged_rows(table, flag_column) if flag_column else 0
    if output:
        atomic_write(output, lambda f: encode(table, fmt, f))
        session.info(f"wrote {table.num_rows} rows to {output} ({fmt})")
    elif fmt == "parquet":
        raise DbmetricsError("--format parquet: binary output needs --output PATH")
    else:
        sys.stdout.flush()
        encode(table, fmt, sys.stdout.buffer)
        sys.stdout.buffer.flush()
    if flagged:
        session.note(f"{flagged} flagged row{'s' if flagged > 1 else ''} in column '{flag_column}'")
        return EXIT_FLAGGED
    return 0


def flagged_rows(table: pa.Table, column: str) -> int:
    """How many rows are true in the BOOLEAN ``column`` (NULL is not true)."""
    if column not in table.column_names:
        raise DbmetricsError(
            f"--fail-on-flag: the result has no column '{column}'; "
            f"columns are: {', '.join(table.column_names)}"
        )
    values = table[column]
    if not pa.types.is_boolean(values.type):
        raise DbmetricsError(
            f"--fail-on-flag: column '{column}' is {values.type}, expected a BOOLEAN column"
        )
    return pc.sum(pc.cast(values, pa.int64())).as_py() or 0
