"""Per-day fingerprints of the logs and their labels, read without the scores, and the
filter that restricts a scan of the logs to chosen days.

A day's fingerprint is

    rows, rows_hash       the day's prediction rows: count and sum of hash(time[, id])
    labels, labels_hash   its labels: count and sum of hash(id, label) over the label
                          table's rows joined to the day's predictions, or, for an inline
                          label column, of hash(time[, id], label) over labelled rows

Sums of hashes do not depend on row order or file layout, so a day's fingerprint changes
when its rows or labels change and stays put otherwise; it reads the time, id and label
columns only. (A rewrite that keeps every time, id and label but changes scores is not seen:
`--since` or `--full` recompute such days.) Days are cut as the saved queries cut them:
`roles.day` (a TIMESTAMPTZ's local date in the store's time zone).
"""

import itertools
from dataclasses import dataclass, replace

from dbmetrics.queries.roles import ColumnRoles, day
from dbmetrics.queries.schema import quote
from dbmetrics.queries.store_manifest import NULL_DAY


@dataclass(frozen=True)
class Day:
    key: str  # manifest day key
    epoch: int | None  # days since 1970-01-01; None for NULL and infinite days
    fingerprint: dict


def _day_columns(day: str) -> str:
    return (
        f"coalesce(CAST({day} AS VARCHAR), '{NULL_DAY}') AS key, "
        f"CASE WHEN isfinite({day}) THEN date_diff('day', DATE '1970-01-01', {day}) END AS epoch"
    )


def fingerprints(con, roles: ColumnRoles) -> dict:
    """{day key: Day} for every day the logs hold rows on."""
    t = f"logs.{quote(roles.time)}"
    ident = [f"logs.{quote(roles.id)}"] if roles.id else []
    row_hash = f"hash({', '.join([t, *ident])})"
    inline = roles.labels is None and roles.label is not None
    label = f"logs.{quote(roles.label)}" if inline else "NULL"
    label_hash = f"hash({', '.join([t, *ident, label])})"
    sql = f"""SELECT {_day_columns("day")}, count(*) AS rows,
    CAST(coalesce(sum(rh), 0) AS VARCHAR) AS rows_hash,
    count(label) AS labels,
    CAST(coalesce(sum(lh) FILTER (WHERE label IS NOT NULL), 0) AS VARCHAR) AS labels_hash
FROM (SELECT {day(roles, t)} AS day, {row_hash} AS rh, {label} AS label, {label_hash} AS lh
      FROM {roles.logs.sql} AS logs)
GROUP BY day"""
    zone = {"timezone": roles.values["timezone"]}
    rows = con.execute(sql, {**roles.logs.bound, **_bound_in(sql, zone)}).fetchall()
    days = {
        key: Day(key, epoch, {"rows": n, "rows_hash": rh, "labels": nl, "labels_hash": lh})
        for key, epoch, n, rh, nl, lh in rows
    }
    if roles.labels is not None:
        idc = quote(roles.id)
        sql = f"""SELECT {_day_columns("p.day")}, count(*) AS labels,
    CAST(sum(hash(l.id, l.label)) AS VARCHAR) AS labels_hash
FROM (SELECT {day(roles, t)} AS day, logs.{idc} AS id FROM {roles.logs.sql} AS logs) AS p
JOIN (SELECT labels.{idc} AS id, labels.{quote(roles.label)} AS label
      FROM {roles.labels.sql} AS labels) AS l ON p.id = l.id
GROUP BY p.day"""
        bound = {**roles.logs.bound, **roles.labels.bound, **_bound_in(sql, zone)}
        for key, _, n, lh in con.execute(sql, bound).fetchall():
            days[key].fingerprint.update(labels=n, labels_hash=lh)
    return days


def _bound_in(sql: str, values: dict) -> dict:
    """`values` the SQL uses (DuckDB refuses unused bound names)."""
    return {k: v for k, v in values.items() if f"${k}" in sql}


def only_days(roles: ColumnRoles, days: list, zoned: bool) -> tuple:
    """(roles whose logs hold only the rows of `days` (plus, for a time zone-aware time
    column, up to a day either side), values to bind). One UNION ALL branch per run of
    consecutive days, each a time range DuckDB pushes into the Parquet scan."""
    t = f"logs.{quote(roles.time)}"
    epochs = sorted(d.epoch for d in days if d.epoch is not None)
    branches, values = [], {}
    runs = itertools.groupby(enumerate(epochs), key=lambda pair: pair[1] - pair[0])
    for i, (_, run) in enumerate(runs):
        run = [e for _, e in run]
        lo, hi = run[0] - (1 if zoned else 0), run[-1] + 1 + (1 if zoned else 0)
        values[f"day_lo_{i}"], values[f"day_hi_{i}"] = lo, hi
        branches.append(
            f"{t} >= DATE '1970-01-01' + CAST($day_lo_{i} AS INTEGER) "
            f"AND {t} < DATE '1970-01-01' + CAST($day_hi_{i} AS INTEGER)"
        )
    if any(d.key == NULL_DAY for d in days):
        branches.append(f"{t} IS NULL")
    if any(d.epoch is None and d.key != NULL_DAY for d in days):
        branches.append(f"NOT isfinite({t})")
    sql = "\n  UNION ALL ".join(
        f"SELECT * FROM {roles.logs.sql} AS logs WHERE {b}" for b in branches
    )
    logs = replace(roles.logs, sql=f"({sql})", bound={**roles.logs.bound, **values})
    return replace(roles, logs=logs), logs.bound
