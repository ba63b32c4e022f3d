"""Output options shared by ``run`` and ``sql``, and writing a result with them."""

from __future__ import annotations

import os
import shutil
import sys
import textwrap
from dataclasses import dataclass

import click
import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.atomic import write_output
from dbmetrics.cli.output import FORMATS, choose_format, encode
from dbmetrics.cli.session import Session
from dbmetrics.cli.textable import markdown, result_table, safe
from dbmetrics.errors import DbmetricsError

EXIT_FLAGGED = 3
CSV_FORMULAS = "dbmetrics.csv_formulas"  # ctx.meta key set by --csv-formulas


def output_options(command):
    """``--format``, ``--output``, ``--fail-on-flag``, ``--columns``, ``--all-columns`` and
    ``--csv-formulas``."""
    command = click.option(
        "--csv-formulas",
        is_flag=True,
        expose_value=False,
        callback=lambda ctx, _, value: ctx.meta.__setitem__(CSV_FORMULAS, value),
        help="CSV: keep text cells that start with = + - @ as they are. By default they get a "
        "leading ' so a spreadsheet shows them instead of running them as formulas.",
    )(command)
    command = click.option(
        "--all-columns",
        is_flag=True,
        help="Table and markdown: show every column (default: the query's key columns, "
        "fitted to the terminal width).",
    )(command)
    command = click.option(
        "--columns",
        "pick",
        metavar="A,B,...",
        help="Table and markdown: show these columns, in this order.",
    )(command)
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
    session: Session,
    table: pa.Table,
    fmt: str | None,
    output: str | None,
    flag_column: str | None,
    pick: str | None = None,
    all_columns: bool = False,
    key: KeyColumns | None = None,
) -> int:
    """Write ``table`` to ``output`` or stdout; the exit status (3 if flagged rows).

    CSV, JSON and Parquet get every column at full precision. ``table`` and ``markdown`` are
    for reading: they show the ``--columns`` given, or every column with ``--all-columns``, or
    else ``key`` (the query's key columns; all when None), the table fitted to the terminal.
    """
    fmt = choose_format(fmt, output)
    flagged = _flagged_rows(table, flag_column) if flag_column else 0
    ctx = click.get_current_context(silent=True)
    formulas = bool(ctx and ctx.meta.get(CSV_FORMULAS))
    if fmt in ("table", "markdown"):
        data = _readable(session, table, fmt, output, pick, all_columns, key)
        if output:
            write_output(output, lambda f: f.write(data))
            session.info(f"wrote {table.num_rows} rows to {output} ({fmt})")
        else:
            sys.stdout.flush()
            sys.stdout.buffer.write(data)
            sys.stdout.buffer.flush()
    elif output:
        write_output(output, lambda f: encode(table, fmt, f, formulas))
        session.info(f"wrote {table.num_rows} rows to {output} ({fmt})")
    elif fmt == "parquet":
        raise DbmetricsError("--format parquet: binary output needs --output PATH")
    else:
        sys.stdout.flush()
        encode(table, fmt, sys.stdout.buffer, formulas)
        sys.stdout.buffer.flush()
    missing = _unmatched(table)
    if missing:
        session.note(
            f"{missing} of {table.num_rows} cells found no business row (business_found false)"
        )
    if flagged:
        session.note(f"{flagged} flagged row{'s' if flagged > 1 else ''} in column '{flag_column}'")
        return EXIT_FLAGGED
    return 0


def _flagged_rows(table: pa.Table, column: str) -> int:
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


@dataclass(frozen=True)
class KeyColumns:
    """A query's key columns (``-- show:``) and every column its header declares."""

    first: tuple
    declared: frozenset

    def of(self, table: pa.Table) -> list[str]:
        """The key columns present in ``table``, then the columns the header does not declare
        (e.g. a joined business table's)."""
        known = self.declared | set(self.first)
        return [c for c in self.first if c in table.column_names] + [
            c for c in table.column_names if c not in known
        ]


def key_columns(info, params: dict) -> KeyColumns | None:
    """``info``'s ``-- show:`` list with a column(s) parameter replaced by the columns it names
    (from ``params``, else the default); None when the query declares no key columns."""
    if not info.show:
        return None
    values = {p.name: p.default for p in info.params} | dict(params)
    kinds = {p.name: p.kind for p in info.params}
    first = []
    for name in info.show:
        if kinds.get(name) in ("column", "columns"):
            first += [c.strip() for c in str(values.get(name) or "").split(",") if c.strip()]
        else:
            first.append(name)
    return KeyColumns(tuple(first), frozenset(c for c, _ in info.outputs))


def _chosen(table: pa.Table, pick, all_columns, key) -> tuple[list[str], bool]:
    """(columns to show, whether they may be left out to fit the width)."""
    if pick is not None and all_columns:
        raise DbmetricsError("--columns and --all-columns exclude each other")
    if all_columns:
        return list(table.column_names), False
    if pick is not None:
        names = [c.strip() for c in pick.split(",") if c.strip()]
        unknown = [c for c in names if c not in table.column_names]
        if unknown or not names:
            raise DbmetricsError(
                f"--columns: the result has no column {', '.join(repr(c) for c in unknown)}; "
                f"columns are: {', '.join(table.column_names)}"
            )
        return names, False
    if key is None:
        return list(table.column_names), True
    return key.of(table), True


def _width(output: str | None) -> int | None:
    """The terminal's width for a table on a terminal; ``COLUMNS`` when set; else no limit."""
    if output is None and sys.stdout.isatty():
        return shutil.get_terminal_size().columns
    columns = os.environ.get("COLUMNS", "")
    return int(columns) if output is None and columns.isdigit() and int(columns) > 0 else None


def _readable(session, table, fmt, output, pick, all_columns, key) -> bytes:
    """The table or markdown text, with a line naming the columns left out."""
    columns, elide = _chosen(table, pick, all_columns, key)
    hidden = [c for c in table.column_names if c not in columns]
    if fmt == "markdown":
        if hidden:
            session.note(_left_out(hidden, table.num_columns, None))
        return markdown(table, columns).encode()
    width = _width(output)
    fitted = result_table(table, columns, width, elide)
    text = fitted.text
    if fitted.hidden:
        text += _left_out(list(fitted.hidden), table.num_columns, width) + "\n"
    return text.encode()


def _left_out(hidden: list[str], total: int, width: int | None) -> str:
    """``9 of 23 columns not shown: a, b, ...; --all-columns shows every column, --columns A,B,...
    the ones you name.``"""
    text = (
        f"{len(hidden)} of {total} columns not shown: {safe(', '.join(hidden))}. "
        "See them with --all-columns, or choose with --columns A,B,..."
    )
    return "\n".join(textwrap.wrap(text, width or 100, break_on_hyphens=False))


def _unmatched(table: pa.Table) -> int:
    """Rows whose BOOLEAN ``business_found`` (the segments query's) is false."""
    if "business_found" not in table.column_names:
        return 0
    found = table["business_found"]
    if not pa.types.is_boolean(found.type):
        return 0
    return pc.sum(pc.cast(pc.invert(found), pa.int64())).as_py() or 0
