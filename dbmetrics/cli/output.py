"""Result formats (files are written by dbmetrics.atomic.write_output).

Formats: ``table`` (aligned text), ``markdown``, ``csv`` (pyarrow.csv), ``json`` and ``parquet``.
JSON is one array of records. JSON has no NaN or infinity, so they are written as the strings
``"NaN"``, ``"Infinity"`` and ``"-Infinity"`` (the spelling JavaScript's ``Number()`` and
Python's ``float()`` read back), distinct from ``null`` (SQL NULL); dates and times are ISO 8601
strings, decimals numbers, binary hex strings.
"""

from __future__ import annotations

import datetime as dt
import decimal
import io
import json
import math
import re
from pathlib import Path
from typing import BinaryIO

import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.cli.textable import markdown, render
from dbmetrics.errors import DbmetricsError

FORMATS = ("table", "markdown", "csv", "json", "parquet")
SUFFIXES = {
    ".txt": "table",
    ".md": "markdown",
    ".csv": "csv",
    ".json": "json",
    ".parquet": "parquet",
    ".pq": "parquet",
}


def choose_format(fmt: str | None, output: str | None) -> str:
    """``--format`` if given, else the output suffix's format, else ``table``."""
    if fmt:
        return fmt
    if output is None:
        return "table"
    suffix = Path(output).suffix.lower()
    if suffix not in SUFFIXES:
        raise DbmetricsError(
            f"--output: cannot tell the format from '{output}'; "
            f"use a suffix ({', '.join(SUFFIXES)}) or pass --format"
        )
    return SUFFIXES[suffix]


def encode(table: pa.Table, fmt: str, out: BinaryIO, formulas: bool = False) -> None:
    """Write ``table`` to the binary stream ``out`` in format ``fmt``.

    formulas: for csv, keep text cells that a spreadsheet would run as formulas as they are
    (default: neutralised, see ``neutralise_formulas``).
    """
    if fmt == "csv" and not formulas:
        table = _neutralise_formulas(table)
    try:
        _WRITERS[fmt](table, out)
    except (pa.ArrowNotImplementedError, pa.ArrowInvalid) as e:
        raise DbmetricsError(
            f"--format {fmt}: cannot write this result: {e}; try --format json or parquet"
        ) from None


FORMULA_START = "=+-@\t\r"
_FORMULA = "^[=+\\-@\t\r]"
_NUMBER = "[+-]?(?:[0-9]+\\.?[0-9]*|\\.[0-9]+)(?:[eE][+-]?[0-9]+)?"


def _neutralise_formulas(table: pa.Table) -> pa.Table:
    """Text cells (and column names) that start with ``= + - @``, a tab or a carriage return get a
    leading ``'``, so a spreadsheet opening the CSV shows them as text instead of running them as
    formulas (the OWASP "CSV injection" advice). A text cell that is just a signed number, such
    as ``-1.5``, cannot run anything and is left alone; numeric columns are never touched.

    >>> t = _neutralise_formulas(pa.table({"seg": ["=1+2", "-1.5", "a", None], "x": [-1, 2, 3, 4]}))
    >>> t.to_pydict()
    {'seg': ["'=1+2", '-1.5', 'a', None], 'x': [-1, 2, 3, 4]}
    """
    columns = []
    for column in table.columns:
        kind = column.type.value_type if pa.types.is_dictionary(column.type) else column.type
        if pa.types.is_string(kind) or pa.types.is_large_string(kind):
            text = column.cast(kind) if kind is not column.type else column
            risky = pc.and_(
                pc.match_substring_regex(text, _FORMULA),
                pc.invert(pc.match_substring_regex(text, f"^{_NUMBER}$")),
            )
            column = pc.if_else(risky, pc.binary_join_element_wise("'", text, ""), text)
        columns.append(column)
    names = [
        f"'{n}" if n[:1] and n[0] in FORMULA_START and not re.fullmatch(_NUMBER, n) else n
        for n in table.column_names
    ]
    return pa.table(columns, names=names)


def _table(table: pa.Table, out: BinaryIO) -> None:
    out.write(render(table).encode())


def _markdown(table: pa.Table, out: BinaryIO) -> None:
    out.write(markdown(table).encode())


def _csv(table: pa.Table, out: BinaryIO) -> None:
    import pyarrow.csv as pcsv

    buf = io.BytesIO()
    pcsv.write_csv(table, buf)
    out.write(buf.getvalue())


def _parquet(table: pa.Table, out: BinaryIO) -> None:
    import pyarrow.parquet as pq

    pq.write_table(table, out)


def _json(table: pa.Table, out: BinaryIO) -> None:
    """An array with one record per line."""
    rows = [
        json.dumps(_plain(row), ensure_ascii=False, allow_nan=False, default=_default)
        for row in table.to_pylist()
    ]
    out.write(("[\n" + ",\n".join(rows) + "\n]\n" if rows else "[]\n").encode())


def _plain(value):
    """Replace non-finite floats with "NaN", "Infinity" or "-Infinity", recursively."""
    if isinstance(value, float):
        if math.isnan(value):
            return "NaN"
        return value if math.isfinite(value) else ("Infinity" if value > 0 else "-Infinity")
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def _default(value):
    if isinstance(value, (dt.date, dt.time)):  # datetime is a date
        return value.isoformat()
    if isinstance(value, dt.timedelta):
        return value.total_seconds()
    if isinstance(value, decimal.Decimal):
        return int(value) if value == value.to_integral_value() else float(value)
    if isinstance(value, bytes):
        return value.hex()
    return str(value)


_WRITERS = {"table": _table, "markdown": _markdown, "csv": _csv, "json": _json, "parquet": _parquet}
