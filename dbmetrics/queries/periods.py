"""Which periods of a result to keep: ``since``, ``until`` and the ``last`` N.

A period is named by its first day (the ``period`` column of the saved queries, cut in the
query's ``timezone``). ``since`` and ``until`` keep the periods whose first day lies in
[since, until] (either end open), as the report's ``--start``/``--end``. ``last`` keeps the
N calendar periods that end with the period holding ``until`` (without ``until``: the
latest period of the result); a period without rows in that span is simply absent, so a
scheduled run over a quiet week shows nothing of older weeks.

The filter cuts the result, after the query, so every row kept is computed as without it:
the drift reference window, which may lie before ``since``, is untouched. Where that saves
work, the scan is cut too: a query in `PER_PERIOD` (each period's rows depend on that
period's days alone) reads only the logs' rows from the first kept period on and before the
period after the last (`scan_window`, `within`), when those ends are known without reading the
data (``last`` without ``until`` leaves the upper end to the result).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, replace

import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.errors import DbmetricsError

from .roles import ColumnRoles
from .schema import quote

GRAINS = ("day", "week", "month")
# Not drift (its reference window, and q-values over the whole table), nor any query of a
# user's, whose periods may depend on each other.
PER_PERIOD = frozenset(
    (
        "rollup",
        "calibration",
        "recalibration",
        "segments",
        "class_metrics",
        "confusion",
        "class_calibration",
        "binary",
        "labels",
    )
)


@dataclass(frozen=True)
class Periods:
    """since/until: dates (first days of the periods kept, both inclusive); last: a count."""

    since: dt.date | None = None
    until: dt.date | None = None
    last: int | None = None

    @property
    def empty(self) -> bool:
        return self.since is None and self.until is None and self.last is None


def periods(since=None, until=None, last=None) -> Periods:
    """A checked `Periods` from dates, ISO texts (YYYY-MM-DD) or None, and a count >= 1.

    >>> periods("2026-03-02", last="2")
    Periods(since=datetime.date(2026, 3, 2), until=None, last=2)
    """
    first, end = _date("since", since), _date("until", until)
    if first is not None and end is not None and first > end:
        raise DbmetricsError(f"since {first} is after until {end}; no period can lie between")
    count = None
    if last is not None:
        try:
            count = int(str(last).strip()) if not isinstance(last, int) else last
        except ValueError:
            raise DbmetricsError(f"last: expected a number of periods, got `{last}`") from None
        if count < 1:
            raise DbmetricsError(f"last: expected at least 1 period, got {count}")
    return Periods(first, end, count)


def keep(table: pa.Table, chosen: Periods, grain: str | None, query: str) -> pa.Table:
    """The rows of `table` in the chosen periods (`grain`: day, week or month; default week).
    A result without a `period` column cannot be cut: an error when a filter is given."""
    if chosen.empty:
        return table
    if "period" not in table.column_names:
        raise DbmetricsError(
            f"query `{query}` has no period column; since, until and last cut only results with one"
        )
    grain = grain or "week"
    if grain not in GRAINS:
        raise DbmetricsError(f"grain: expected one of {', '.join(GRAINS)}, got `{grain}`")
    days = pc.cast(table["period"], pa.date32())
    lo, hi = chosen.since, chosen.until
    if chosen.last is not None:
        anchor = _start_of(hi, grain) if hi is not None else pc.max(days).as_py()
        if anchor is None:  # an empty result
            return table
        first = back(anchor, chosen.last - 1, grain)
        lo = first if lo is None else max(lo, first)
        hi = anchor if hi is None else min(hi, anchor)
    mask = pa.array([True] * table.num_rows, pa.bool_())
    if lo is not None:
        mask = pc.and_(mask, pc.greater_equal(days, pa.scalar(lo, pa.date32())))
    if hi is not None:
        mask = pc.and_(mask, pc.less_equal(days, pa.scalar(hi, pa.date32())))
    return table.filter(pc.fill_null(mask, False))


def scan_window(query: str, chosen: Periods | None, grain: str | None) -> tuple | None:
    """(first day, day after the last) whose rows can fall in the kept periods (either None
    when open), for a query in PER_PERIOD; None when nothing can be cut.

    >>> scan_window("rollup", periods("2026-03-04", "2026-03-10", 4), "week")
    (datetime.date(2026, 3, 9), datetime.date(2026, 3, 16))
    """
    if chosen is None or query not in PER_PERIOD or grain not in GRAINS:
        return None
    first = after = None
    if chosen.since is not None:
        first = _start_of(chosen.since, grain)
        first = first if first == chosen.since else back(first, -1, grain)
    if chosen.until is not None:
        last = _start_of(chosen.until, grain)
        after = back(last, -1, grain)
        if chosen.last is not None:
            earliest = back(last, chosen.last - 1, grain)
            first = earliest if first is None else max(first, earliest)
    return None if first is None and after is None else (first, after)


def within(roles: ColumnRoles, first: dt.date | None, after: dt.date | None) -> ColumnRoles:
    """`roles` whose logs hold only the rows of days first..after (after excluded; either end
    open when None), a time range DuckDB pushes into a Parquet scan. A TIMESTAMPTZ is
    compared in the session's time zone, not `timezone`: the range is widened by a day on
    each side, and the rows of those days fall in periods the result leaves out."""
    pad = dt.timedelta(days=1 if roles.zoned else 0)
    t = f"logs.{quote(roles.time)}"
    tests, bound = [], {}
    if first is not None:
        tests.append(f"{t} >= CAST($period_scan_first AS DATE)")
        bound["period_scan_first"] = first - pad
    if after is not None:
        tests.append(f"{t} < CAST($period_scan_after AS DATE)")
        bound["period_scan_after"] = after + pad
    sql = f"(SELECT * FROM {roles.logs.sql} AS logs WHERE {' AND '.join(tests)})"
    logs = replace(roles.logs, sql=sql, bound={**roles.logs.bound, **bound})
    return replace(roles, logs=logs)


def _start_of(day: dt.date, grain: str) -> dt.date:
    """The first day of the period holding `day`; weeks start on Monday (DuckDB's
    date_trunc('week'), ISO 8601).

    >>> _start_of(dt.date(2026, 3, 4), "week"), _start_of(dt.date(2026, 3, 4), "month")
    (datetime.date(2026, 3, 2), datetime.date(2026, 3, 1))
    """
    if grain == "week":
        return day - dt.timedelta(days=day.weekday())
    if grain == "month":
        return day.replace(day=1)
    return day


def back(first: dt.date, steps: int, grain: str) -> dt.date:
    """The first day of the period `steps` periods before the one starting on `first` (after
    it for negative `steps`).

    >>> back(dt.date(2026, 3, 1), 3, "month")
    datetime.date(2025, 12, 1)
    """
    if grain == "month":
        months = first.year * 12 + first.month - 1 - steps
        return dt.date(months // 12, months % 12 + 1, 1)
    return first - dt.timedelta(days=steps * (7 if grain == "week" else 1))


def _date(name: str, value) -> dt.date | None:
    if value is None or isinstance(value, dt.date):
        return value.date() if isinstance(value, dt.datetime) else value
    try:
        return dt.date.fromisoformat(str(value).strip())
    except ValueError:
        raise DbmetricsError(f"{name}: `{value}` is not a date; expected YYYY-MM-DD") from None
