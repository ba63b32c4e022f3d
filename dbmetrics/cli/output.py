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
from pathlib import Path
from typing import BinaryIO

import pyarrow as pa

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


def encode(table: pa.Table, fmt: str, out: BinaryIO) -> None:
    """Write ``table`` to the binary stream ``out`` in format ``fmt``."""
    try:
        _WRITERS[fmt](table, out)
    except (pa.ArrowNotImplementedError, pa.ArrowInvalid) as e:
        raise DbmetricsError(
            f"--format {fmt}: cannot write this result: {e}; try --format json or parquet"
        ) from None


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
