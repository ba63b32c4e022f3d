"""The driver side: read the sources, check the column roles, run the Spark passes, publish.

An update on Spark is `partials.Update` with its two reading steps done by Spark tasks:

1. fingerprints: each task fingerprints its rows' days; Spark adds them up per day, and
   `Update.plan` chooses the days to recompute exactly as the DuckDB update does;
2. states: Spark keeps the rows near those days (a coarse filter; the tasks cut the exact
   days with the DuckDB update's `only_days`), each task computes the partial states of its
   rows, and Spark adds them up per day x keys.

Spark joins each prediction to its rows of the label table (a shuffle by id) before both
passes. The day files reach the store through `partials.store.Publisher`, the DuckDB
update's own publish step: staged, then one manifest swap, refused if another update
published since this one read the store.
"""

import dataclasses
import datetime as dt
import functools
from pathlib import Path

import duckdb
import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.errors import DbmetricsError
from dbmetrics.partials.store import Publisher, write_day_file
from dbmetrics.partials.update import (
    KEY,
    RECORDED,
    Update,
    column_roles_texts,
    epoch_of,
    session_time_zone,
)
from dbmetrics.queries.roles import column_roles
from dbmetrics.queries.schema import CSV_SUFFIXES, first_line, open_source
from dbmetrics.queries.state_kinds import KINDS_BY_NAME, column_type
from dbmetrics.queries.state_sql import CLASS_STATE_COLUMNS, INTERNAL, STATE_COLUMNS
from dbmetrics.queries.values import convert

from .task import FINGERPRINTS, KIND, LATE, TaskSpec, fingerprints_of_task, states_of_task

DATAFRAME = "(a Spark DataFrame)"  # what the manifest records for a DataFrame source
DRIVER_ROWS = 1_000_000  # summed state rows up to which the driver writes the day files
LABEL_ID = "dbmetrics_label_id"
RESERVED = set(STATE_COLUMNS + CLASS_STATE_COLUMNS + INTERNAL) | {
    KIND.lower(),
    LATE.lower(),
    LABEL_ID.lower(),
    KEY.lower(),
}
WRITE_FROM = ("auto", "driver", "workers")


def _backticked(name: str) -> str:
    """A Spark column reference that takes `name` literally (dots, spaces, backticks)."""
    return "`" + name.replace("`", "``") + "`"


def _read_source(spark, param: str, value):
    """(DataFrame, text): a DataFrame as given, else the table or the path the session reads."""
    from pyspark.errors import AnalysisException
    from pyspark.sql import DataFrame

    if isinstance(value, DataFrame):
        return value, DATAFRAME
    text = str(value).strip()
    try:
        if spark.catalog.tableExists(text):
            return spark.table(text), text
    except (AnalysisException, ValueError):
        pass  # not a table name: a path
    try:
        if text.lower().endswith(CSV_SUFFIXES):
            return spark.read.csv(text, header=True, inferSchema=True), text
        return spark.read.option("mergeSchema", "true").parquet(text), text
    except AnalysisException as exc:
        raise DbmetricsError(
            f"{param}: `{text}` is neither a table nor a path the Spark session can read "
            f"({first_line(exc)})"
        ) from None


def _arrow_schema(df, param: str) -> pa.Schema:
    from pyspark.sql.pandas.types import to_arrow_schema

    try:
        return to_arrow_schema(df.schema, timezone="UTC")
    except Exception as exc:  # pyspark raises several kinds for types Arrow cannot carry
        raise DbmetricsError(f"{param}: a column type cannot pass to Arrow ({exc})") from None


def _checked_roles(texts: dict, schemas: dict) -> tuple:
    """(roles, sources) checked with the DuckDB update's own code and messages, against empty
    tables of the sources' Arrow schemas (DuckDB names their types as it would the logs');
    the time zone is checked as the DuckDB update checks it."""
    con = duckdb.connect()
    try:
        with session_time_zone(con, texts["timezone"]):
            sources = {}
            for param, schema in schemas.items():
                name = f"dbmetrics_spark_{param}"
                con.register(name, schema.empty_table())
                found = open_source(con, param, name)
                sources[param] = dataclasses.replace(found, sql=name)
            return column_roles(texts, sources, RESERVED), sources
    finally:
        con.close()


def _union_schema(logs: pa.Schema, keys: list) -> pa.Schema:
    """The states pass output: KIND, day, keys (the log's Arrow types), every kind's keys and
    columns in their declared types."""
    fields = {KIND: pa.string(), "day": column_type("day")}
    fields.update({k: logs.field(k).type for k in keys})
    for kind in KINDS_BY_NAME.values():
        fields.update({c: column_type(c) for c in (*kind.keys, *kind.columns) if c not in fields})
    return pa.schema(list(fields.items()))


class SparkUpdate(Update):
    """`partials.Update` whose reading is done by Spark; see the module docstring. It does not
    hold the store lock while Spark runs: the commit is refused if another update published
    in the meantime."""

    def compute_on(self, spark, only_since: dt.date | None = None) -> None:
        """Read the logs with Spark: fingerprints, the plan, then the states of the days to
        recompute (only those from `only_since` on, when given) as summed DataFrames."""
        from pyspark.sql import functions as F

        self.manifest = self.store.manifest()
        recorded = self.manifest["column_roles"] if self.manifest else None
        params = dict(self.params)
        if self.manifest and params.get("logs") is None:
            params["logs"] = self.manifest["logs"]
        frames, named = {}, {}
        for name in ("logs", "labels"):
            value = params.pop(name, None)
            if value is None or (isinstance(value, str) and not value.strip()):
                if name == "labels" and recorded and recorded.get("labels"):
                    value = recorded["labels"]
                else:
                    continue
            frames[name], named[name] = _read_source(spark, name, value)
        texts, declared = column_roles_texts({**params, **named}, recorded)
        self.texts = texts
        schemas = {name: _arrow_schema(df, name) for name, df in frames.items()}
        roles, sources = _checked_roles(texts, schemas)
        keys = [roles.version, *roles.segments]
        wanted = [roles.time, roles.scores, *keys]
        wanted += [roles.id] if roles.id else []
        wanted += [roles.label] if roles.label and roles.labels is None else []
        rows = frames["logs"].select(*(_backticked(c) for c in dict.fromkeys(wanted)))
        if roles.labels is not None:
            label_id = sources["labels"].column(texts["id_col"], "id_col")
            late = (
                frames["labels"]
                .groupBy(F.col(_backticked(label_id)).alias(LABEL_ID))
                .agg(
                    F.collect_list(
                        F.struct(F.col(_backticked(roles.label)).alias(roles.label))
                    ).alias(LATE)
                )
            )
            rows = rows.join(late, rows[_backticked(roles.id)] == late[LABEL_ID], "left")
            rows = rows.drop(LABEL_ID)
        spec = TaskSpec(roles, texts["timezone"])
        self.plan(self.spark_fingerprints(rows, spec))
        if only_since is not None:
            first = epoch_of(only_since)
            self.recompute = [
                k for k in self.recompute if (e := self.current[k].epoch) is not None and e >= first
            ]
        self.frames = {}
        if self.recompute:
            days = tuple(self.current[k] for k in self.recompute)
            zoned = sources["logs"].type_of(roles.time).startswith("TIMESTAMP WITH")
            values = {"bins": convert(declared.param("bins"), texts["bins"]), **roles.values}
            output = _union_schema(schemas["logs"], keys)
            spec = dataclasses.replace(spec, values=values, days=days, zoned=zoned, output=output)
            self.frames = self.spark_states(near(rows, roles.time, days), spec, keys)

    def spark_fingerprints(self, rows, spec: TaskSpec) -> dict:
        """{day key: Day}: the tasks' fingerprints added up per day (exact integer sums)."""
        from pyspark.sql import functions as F
        from pyspark.sql.pandas.types import from_arrow_schema

        from dbmetrics.partials.fingerprint import Day

        parts = rows.mapInArrow(
            functools.partial(fingerprints_of_task, spec), from_arrow_schema(FINGERPRINTS)
        )
        summed = parts.groupBy("key", "epoch").agg(
            *(F.sum(c).alias(c) for c in ("rows", "rows_hash", "labels", "labels_hash"))
        )
        days = {}
        for r in summed.toArrow().to_pylist():
            fingerprint = {
                "rows": int(r["rows"]),
                "rows_hash": str(int(r["rows_hash"])),
                "labels": int(r["labels"]),
                "labels_hash": str(int(r["labels_hash"])),
            }
            days[r["key"]] = Day(r["key"], r["epoch"], fingerprint)
        return days

    def spark_states(self, rows, spec: TaskSpec, keys: list) -> dict:
        """{kind: DataFrame}: the tasks' partial states added up per day x keys x the kind's
        own keys, on the days to recompute (plain sums; NULL keys group as in DuckDB)."""
        from pyspark.sql import functions as F
        from pyspark.sql.pandas.types import from_arrow_schema, from_arrow_type

        parts = rows.mapInArrow(
            functools.partial(states_of_task, spec), from_arrow_schema(spec.output)
        ).persist()
        self.persisted = parts
        day_key = F.coalesce(F.col("day").cast("string"), F.lit("null"))
        frames = {}
        for name, kind in KINDS_BY_NAME.items():
            groups = [_backticked(c) for c in ["day", *keys, *kind.keys]]
            frames[name] = (
                parts.where((F.col(KIND) == name) & day_key.isin(list(self.recompute)))
                .groupBy(*groups)
                .agg(
                    *(
                        F.sum(_backticked(c)).cast(from_arrow_type(column_type(c))).alias(c)
                        for c in kind.columns
                    )
                )
                .withColumn(KEY, day_key)
            )
        return frames

    def publish_from(self, write_from: str) -> dict:
        """Stage the recomputed days' files (written by the driver or by the Spark tasks)
        and publish them with the kept days, as `Update.publish` does."""
        base = self.manifest["generation"] if self.manifest else 0
        days = {
            k: {"files": e["files"], "fingerprint": e["fingerprint"]} for k, e in self.kept.items()
        }
        try:
            with Publisher(self.store, base) as pub:
                rows = _stage_days(pub, self.frames, self.recompute, write_from)
                for key in self.recompute:
                    if rows.get(key, 0) != self.current[key].fingerprint["rows"]:
                        raise DbmetricsError(
                            f"partials: day {key} has {self.current[key].fingerprint['rows']} "
                            f"rows in the logs but {rows.get(key, 0)} were summarised (the "
                            "logs changed during the update?); nothing was published"
                        )
                    days[key] = {"files": {}, "fingerprint": self.current[key].fingerprint}
                roles = {k: self.texts[k] for k in RECORDED}
                generation = pub.commit(days, roles, logs=self.texts["logs"], stale=self.stale)
        finally:
            if getattr(self, "persisted", None) is not None:
                self.persisted.unpersist()
        return {
            "store": str(self.store.root),
            "generation": generation,
            "days_written": len(self.recompute),
            "days_held": len(days),
            "days_stale": len(self.stale),
            "rows_summarised": sum(rows.values()),
        }


def near(rows, time: str, days: tuple):
    """The rows within a day of the days to compute (NULL times when the NULL day is one):
    a coarse filter that lets Spark skip files; the tasks cut the exact days."""
    from pyspark.sql import functions as F

    t = F.col(_backticked(time))
    epochs = [d.epoch for d in days if d.epoch is not None]
    keep = t.isNull() if any(d.epoch is None for d in days) else F.lit(False)
    if epochs:
        first = dt.date(1970, 1, 1) + dt.timedelta(days=min(epochs) - 1)
        last = dt.date(1970, 1, 1) + dt.timedelta(days=max(epochs) + 2)
        keep = keep | ((t >= F.lit(first)) & (t < F.lit(last)))
    return rows.where(keep)


def _stage_days(pub: Publisher, frames: dict, recompute: list, write_from: str) -> dict:
    """Stage every kind's file of every day in `recompute`; returns {day key: rows}."""
    if write_from == "auto":
        count = frames["state"].count() if frames else 0
        write_from = "workers" if count > DRIVER_ROWS else "driver"
    staged = {}
    if write_from == "driver":
        for kind, df in frames.items():
            table = df.toArrow()
            column = table.column(KEY)
            for key in recompute:
                day = table.filter(pc.equal(column, pa.scalar(key))).drop_columns([KEY])
                pub.stage(kind, key, day)
                staged[(kind, key)] = day
    else:
        for kind, df in frames.items():
            write = functools.partial(_write_task, str(pub.folder), kind)
            files = (
                df.repartition(KEY)
                .mapInArrow(write, "key string, file string, rows long")
                .toArrow()
                .to_pylist()
            )
            for row in files:
                pub.stage_written(kind, row["key"], row["file"])
                staged[(kind, row["key"])] = row["rows"]
            empty = None
            for key in recompute:
                if (kind, key) not in staged:  # a day without rows of this kind
                    if empty is None:
                        empty = df.limit(0).toArrow().drop_columns([KEY])
                    pub.stage(kind, key, empty)
                    staged[(kind, key)] = empty
    rows = {}
    for (kind, key), table in staged.items():
        if kind == "state":
            rows[key] = (
                table if isinstance(table, int) else int(pc.sum(table.column("rows")).as_py() or 0)
            )
    return rows


def _write_task(folder: str, kind: str, batches):
    """mapInArrow body: write each day of the task's rows as one `kind` file into the
    publisher's staging folder (declared schema, a new name); yields key, file, rows."""
    batches = [b for b in batches if b.num_rows]
    if not batches:
        return
    table = pa.Table.from_batches(batches)
    column = table.column(KEY)
    out = []
    for key in sorted(set(column.to_pylist())):
        day = table.filter(pc.equal(column, pa.scalar(key))).drop_columns([KEY])
        path = write_day_file(Path(folder), kind, day)
        rows = int(pc.sum(day.column("rows")).as_py() or 0) if kind == "state" else 0
        out.append({"key": key, "file": str(path), "rows": rows})
    yield pa.RecordBatch.from_pylist(
        out, schema=pa.schema([("key", pa.string()), ("file", pa.string()), ("rows", pa.int64())])
    )


def state_frames(spark, params: dict, since: dt.date | None = None) -> dict:
    """The partial states of the log named in `params` (the `partials update` column roles,
    with `timezone`) as Spark DataFrames by state kind ("state", "class_state"), in the store
    files' column order, for the days from `since` on (default: every day). Nothing is
    written; the frames read one persisted DataFrame of the tasks' output."""
    job = SparkUpdate(Path("."), params)
    job.store = _NoStore()
    job.compute_on(spark, only_since=since)
    return {kind: df.drop(KEY) for kind, df in job.frames.items()}


class _NoStore:
    """No store: `Update.plan` then sees no stored day (every day of the logs is new)."""

    root = Path(".")

    def manifest(self):
        return None

    def missing_files(self, manifest):
        return []


def update_store(
    spark,
    params: dict,
    store,
    since: dt.date | None = None,
    relabel_days: int | None = None,
    full: bool = False,
    drop_vanished: bool = False,
    write_from: str = "auto",
    warn=None,
) -> dict:
    """`partials update` on Spark: the same parameters, checks, store and summary.

    params: the column roles as for `partials update` (logs and labels may be Spark
    DataFrames, table names or paths the session reads; an existing store reuses the ones it
    was built with), and `timezone` (default UTC; recorded in the store, and an update with
    another is refused). since, relabel_days, full, drop_vanished: as `partials update`.
    write_from: "driver" collects the summed states and writes the day files; "workers"
    has the Spark tasks write their days' files into the store's staging folder (which they
    must reach); "auto" picks "workers" above DRIVER_ROWS summed state rows. The files
    become visible at the final commit, refused if another update published since.
    warn(message) receives the warnings `partials update` prints.
    """
    if write_from not in WRITE_FROM:
        raise DbmetricsError(f"write_from: one of {', '.join(WRITE_FROM)}; got `{write_from}`")
    job = SparkUpdate(
        store,
        params,
        since=since,
        relabel_days=relabel_days,
        full=full,
        drop_vanished=drop_vanished,
        warn=warn,
    )
    job.compute_on(spark)
    return job.publish_from(write_from)
