"""Selecting result rows before drawing: equal values and a period range."""

from __future__ import annotations

import datetime as dt

import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.errors import DbmetricsError


def keep_rows(
    table: pa.Table, equal: dict[str, str], start: dt.date | None = None, end: dt.date | None = None
) -> pa.Table:
    """Rows whose COLUMN, as text, equals VALUE for every item of ``equal`` and whose
    ``period`` (first day of the period) lies in [start, end]; either end may be open."""
    mask = pa.array([True] * table.num_rows, pa.bool_())
    for column, value in equal.items():
        if column not in table.column_names:
            raise DbmetricsError(
                f"--only: the result has no column '{column}'; "
                f"columns are: {', '.join(table.column_names)}"
            )
        mask = pc.and_(
            mask, pc.fill_null(pc.equal(pc.cast(table[column], pa.string()), value), False)
        )
    if start is not None:
        mask = pc.and_(mask, pc.greater_equal(table["period"], pa.scalar(start, pa.date32())))
    if end is not None:
        mask = pc.and_(mask, pc.less_equal(table["period"], pa.scalar(end, pa.date32())))
    return table.filter(mask)


def split_keys(table: pa.Table, keys: tuple[str, ...], by: str) -> tuple[list[str], dict[str, str]]:
    """The group columns other than ``by``: those with several values, and those with one
    (column -> that value as text, for titles)."""
    distinct = {k: set(table[k].to_pylist()) for k in keys if k != by and k in table.column_names}
    varying = [k for k, values in distinct.items() if len(values) > 1]
    fixed = {k: text(next(iter(values))) for k, values in distinct.items() if len(values) == 1}
    return varying, fixed


def text(value) -> str:
    """A group value as shown in legends and titles."""
    return "NULL" if value is None else str(value)
