"""What one Spark task runs: dbmetrics' own computations over the task's rows.

No pyspark here: a task gets Arrow record batches of the log's role columns (and, with a
separate label table, each prediction's rows of that table as a list column, LATE) and
returns Arrow batches. Inside, a DuckDB connection reads the rows with the DuckDB update's
own functions: `partials.fingerprint.fingerprints` (per-day fingerprints of rows and
labels), `only_days` and `queries.state_kinds.compute_kinds` (the partial states, through the
`predictions` SQL: day cut, label conversion, the conflicting-label rule). Every output is a
sum over rows, so Spark only adds the tasks' outputs up.
"""

import dataclasses
from collections.abc import Iterator
from decimal import Decimal

import pyarrow as pa

from dbmetrics.queries.roles import ColumnRoles
from dbmetrics.queries.schema import Source, quote

TASK_LOGS = "dbmetrics_task_logs"
LATE = "dbmetrics_late"  # list of structs: the label table's rows for the prediction's id
KIND = "dbmetrics_kind"  # which state kind a row of the states output belongs to
FINGERPRINTS = pa.schema(
    [
        ("key", pa.string()),
        ("epoch", pa.int64()),
        ("rows", pa.int64()),
        ("rows_hash", pa.decimal128(38, 0)),
        ("labels", pa.int64()),
        ("labels_hash", pa.decimal128(38, 0)),
    ]
)


@dataclasses.dataclass(frozen=True)
class TaskSpec:
    """Everything a task needs, pickled to the workers with the function."""

    roles: ColumnRoles  # checked on the driver against the sources' schemas
    timezone: str  # cuts days (DuckDB's TimeZone setting)
    values: dict | None = None  # bins, classes (the states pass)
    days: tuple = ()  # fingerprint.Day of the days to compute (the states pass)
    zoned: bool = False  # the time column is time zone-aware
    output: pa.Schema | None = None  # KIND, day, keys, every kind's columns (states pass)
    threads: int = 1


def _task_roles(roles: ColumnRoles, logs_columns: dict) -> ColumnRoles:
    """The driver's roles, with the logs read from the task's rows and the label table from
    their LATE lists (once per id: a prediction id may repeat in the logs)."""
    logs = Source("logs", TASK_LOGS, {}, logs_columns)
    if roles.labels is None:
        return dataclasses.replace(roles, logs=logs)
    idc, label, late = quote(roles.id), quote(roles.label), quote(LATE)
    labels_sql = (
        f"(SELECT {idc}, late.{label} AS {label} FROM (SELECT {idc}, unnest({late}) AS late "
        f"FROM (SELECT DISTINCT {idc}, {late} FROM {TASK_LOGS} WHERE {idc} IS NOT NULL)))"
    )
    columns = {roles.id: logs_columns[roles.id], roles.label: roles.labels.columns[roles.label]}
    return dataclasses.replace(roles, logs=logs, labels=Source("labels", labels_sql, {}, columns))


def _connected(spec: TaskSpec, batches: list):
    """A DuckDB connection holding the task's rows, and the task's roles over them."""
    import dbmetrics

    con = dbmetrics.connect(threads=spec.threads)
    con.execute(f"SET TimeZone = '{spec.timezone}'")  # a name checked on the driver
    con.register(TASK_LOGS, pa.Table.from_batches(batches))
    described = con.execute(f"DESCRIBE SELECT * FROM {TASK_LOGS}").fetchall()
    return con, _task_roles(spec.roles, {row[0]: row[1] for row in described})


def fingerprints_of_task(
    spec: TaskSpec, batches: Iterator[pa.RecordBatch]
) -> Iterator[pa.RecordBatch]:
    """mapInArrow body: the per-day fingerprints of the task's rows (FINGERPRINTS)."""
    from dbmetrics.partials.fingerprint import fingerprints

    batches = [b for b in batches if b.num_rows]
    if not batches:
        return
    con, roles = _connected(spec, batches)
    try:
        days = fingerprints(con, roles)
    finally:
        con.close()
    rows = [
        {
            "key": d.key,
            "epoch": d.epoch,
            "rows": d.fingerprint["rows"],
            "rows_hash": Decimal(d.fingerprint["rows_hash"]),
            "labels": d.fingerprint["labels"],
            "labels_hash": Decimal(d.fingerprint["labels_hash"]),
        }
        for d in days.values()
    ]
    yield pa.RecordBatch.from_pylist(rows, schema=FINGERPRINTS)


def states_of_task(spec: TaskSpec, batches: Iterator[pa.RecordBatch]) -> Iterator[pa.RecordBatch]:
    """mapInArrow body: the partial states of the task's rows on `spec.days` (and, for a
    zoned time column, the days either side, which the driver drops), as `spec.output`."""
    from dbmetrics.partials.fingerprint import only_days
    from dbmetrics.queries.state_kinds import compute_kinds

    batches = [b for b in batches if b.num_rows]
    if not batches:
        return
    con, roles = _connected(spec, batches)
    try:
        narrowed, bound = only_days(roles, list(spec.days), spec.zoned)
        states = compute_kinds(con, narrowed, {**spec.values, **bound})
    finally:
        con.close()
    for kind, table in states.items():
        yield from _in_output(kind, table, spec.output).to_batches()


def _in_output(kind: str, table: pa.Table, output: pa.Schema) -> pa.Table:
    """A state table as rows of the union output: KIND set, other kinds' columns NULL, every
    column cast to the declared Spark-side type (DuckDB may hand back narrower integers)."""
    n = table.num_rows
    columns = []
    for field in output:
        if field.name == KIND:
            columns.append(pa.array([kind] * n, field.type))
        elif field.name in table.column_names:
            columns.append(table.column(field.name).cast(field.type))
        else:
            columns.append(pa.nulls(n, field.type))
    return pa.Table.from_arrays(columns, schema=output)
