"""A partials store built on Apache Spark is the store `partials update` builds.

Specification: one log with every hard case (late labels out of order from a separate
table, text labels with `classes`, conflicting duplicate labels, ragged K, NULL and NaN
scores, probabilities and binary kinds, time-zone-aware timestamps, several segment
columns) is turned into a store by Spark (local mode) and by `partials update`; the state
files are equal row for row (counts exact, floats to 1e-12 relative) and every saved query
returns the same table on both stores. A store built by both engines in turn (a Spark
backfill, then daily DuckDB updates) equals a DuckDB rebuild; a Spark job killed between
writing its files and the commit leaves the previous store readable and the next update
removes its files; a DuckDB update that commits while the Spark job runs is kept and the
Spark commit is refused. All Spark tests share one local session (it takes a minute to
start); without pyspark the module is skipped.
"""

import datetime as dt
import json
import os
import sys
import warnings

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics import partials
from dbmetrics.errors import DbmetricsError
from dbmetrics.partials.store import Publisher
from dbmetrics.queries import list_queries, run_query
from dbmetrics.queries import state_kinds as kinds

with warnings.catch_warnings():
    warnings.simplefilter("ignore", FutureWarning)  # pyspark on pandas 3
    pyspark = pytest.importorskip("pyspark", reason="the `spark` extra is not installed")

from dbmetrics.spark import state_frames, update_store  # noqa: E402

pytestmark = [pytest.mark.slow, pytest.mark.filterwarnings("ignore::FutureWarning")]

TIMEZONE = "America/Los_Angeles"  # days cut here differ from UTC days for evening rows
CLASSES = "cat,dog,fox,owl"
START = dt.datetime(2026, 3, 2, tzinfo=dt.timezone.utc)
DAYS = 9


def hard_log(folder, n=2400, seed=11):
    """An invented log with every hard case, and its label table (written as Parquet)."""
    rng = np.random.default_rng(seed)
    minutes = rng.integers(0, DAYS * 24 * 60, n)
    ts = [START + dt.timedelta(minutes=int(m)) for m in minutes]
    ks = rng.choice([3, 4], n)  # ragged K
    logits = [list(rng.normal(size=k) * 2) for k in ks]
    probs = [list(rng.dirichlet(np.ones(k))) for k in ks]
    p = list(rng.uniform(0, 1, n))
    for i in rng.choice(n, n // 10, replace=False):
        case = i % 6
        if case == 0:
            logits[i] = probs[i] = p[i] = None  # NULL scores
        elif case == 1:
            logits[i][0] = probs[i][0] = p[i] = float("nan")
        elif case == 2:
            logits[i][1] = float("-inf")  # a masked class
        elif case == 3:
            probs[i] = [x * 2 for x in probs[i]]  # not a distribution
            p[i] = 1.5
        elif case == 4:
            logits[i] = probs[i] = []  # empty list: missing scores
        else:
            logits[i][0] = float("inf")
    names = CLASSES.split(",")
    truth = [int(rng.integers(0, k)) for k in ks]
    inline = [None if rng.random() < 0.1 else t if rng.random() < 0.95 else 7 for t in truth]
    logs = pa.table(
        {
            "ts": pa.array(ts, pa.timestamp("us", tz="UTC")),
            "model_version": rng.choice(["v1", "v2"], n),
            "region": pa.array(
                [None if rng.random() < 0.05 else r for r in rng.choice(["north", "south"], n)]
            ),
            "channel": pa.array(rng.choice([1, 2, 3], n), pa.int32()),
            "prediction_id": pa.array(np.arange(n, dtype=np.int64) * 7 + 3),
            "logits": pa.array(logits, pa.list_(pa.float32())),
            "probs": pa.array(probs, pa.list_(pa.float64())),
            "p": pa.array(p, pa.float64()),
            "label": pa.array(inline, pa.int64()),
            "outcome": pa.array([None if y is None else int(y % 2) for y in inline], pa.int64()),
        }
    )
    ids = logs.column("prediction_id").to_pylist()
    rows = []
    for i in rng.choice(n, int(n * 0.8), replace=False):  # 20% never labelled
        arrived = ts[i] + dt.timedelta(days=float(rng.uniform(0.5, 12)))
        rows.append((ids[i], names[truth[i]], arrived))
        if rng.random() < 0.05:  # a duplicate that agrees
            rows.append((ids[i], names[truth[i]], arrived + dt.timedelta(hours=3)))
        if rng.random() < 0.03:  # a conflicting duplicate: a bad label
            rows.append((ids[i], names[(truth[i] + 1) % ks[i]], arrived + dt.timedelta(hours=5)))
    rows += [(10**9 + i, "cat", START) for i in range(20)]  # ids no prediction has
    rows += [(ids[i], "wolf", START) for i in range(3)]  # a name not in classes
    rows += [(ids[i], None, START) for i in range(3, 6)]
    order = rng.permutation(len(rows))  # arrival out of order
    labels = pa.table(
        {
            "prediction_id": pa.array([rows[i][0] for i in order], pa.int64()),
            "label": pa.array([rows[i][1] for i in order], pa.string()),
            "labelled_at": pa.array([rows[i][2] for i in order], pa.timestamp("us", tz="UTC")),
        }
    )
    folder.mkdir(parents=True, exist_ok=True)
    pq.write_table(logs, folder / "logs.parquet", row_group_size=500)
    pq.write_table(labels, folder / "labels.parquet")
    return logs, labels


CASES = {
    "logits, late text labels": {
        "scores_col": "logits",
        "scores_kind": "logits",
        "segment_cols": "region,channel",
        "labels": "labels.parquet",
        "id_col": "prediction_id",
        "classes": CLASSES,
    },
    "probs, inline labels": {
        "scores_col": "probs",
        "scores_kind": "probs",
        "segment_cols": "region,channel",
    },
    "binary probability": {
        "scores_col": "p",
        "scores_kind": "binary_prob",
        "label_col": "outcome",
        "segment_cols": "channel",
    },
}


def params_for(folder, case, logs="logs.parquet"):
    out = {"logs": str(folder / logs), "time_col": "ts", **CASES[case]}
    if "labels" in out:
        out["labels"] = str(folder / out["labels"])
    return out


def duckdb_update(params, store, **options):
    """`partials update` with days cut in TIMEZONE."""
    con = dbmetrics.connect()
    try:
        return partials.update(con, {"timezone": TIMEZONE, **params}, store, **options)
    finally:
        con.close()


def spark_update(spark, params, store, **options):
    return update_store(spark, {"timezone": TIMEZONE, **params}, store, **options)


def day_files(store, kind):
    manifest = json.loads((store / "manifest.json").read_text())
    return {day: store / entry["files"][kind] for day, entry in manifest["days"].items()}


def assert_same_rows(expected: pa.Table, got: pa.Table, where: str):
    """Same schema; rows equal after sorting by the keys: counts exact, floats to 1e-12."""
    assert got.schema.equals(expected.schema), where
    floats = [f.name for f in expected.schema if pa.types.is_floating(f.type)]
    keys = [(c, "ascending") for c in expected.column_names if c not in floats]
    a, b = expected.sort_by(keys), got.sort_by(keys)
    assert a.num_rows == b.num_rows, where
    for name in expected.column_names:
        x, y = a.column(name).to_pylist(), b.column(name).to_pylist()
        if name in floats:
            np.testing.assert_allclose(y, x, rtol=1e-12, atol=0, err_msg=f"{where} {name}")
        else:
            assert x == y, f"{where} {name}"


def assert_same_stores(expected, got):
    for kind in ("state", "class_state"):
        a, b = day_files(expected, kind), day_files(got, kind)
        assert sorted(a) == sorted(b)
        for day in a:
            assert_same_rows(pq.read_table(a[day]), pq.read_table(b[day]), f"{kind} {day}")


def saved_query_tables(con, store):
    """Every saved query rolled up from `store`: its table, or the error it gives."""
    out = {}
    for query in list_queries():
        try:
            out[query.name] = run_query(con, query.name, {"partials": str(store)})
        except DbmetricsError as exc:
            out[query.name] = str(exc)
    return out


@pytest.fixture(scope="module")
def spark():
    from pyspark.sql import SparkSession

    os.environ.setdefault("PYSPARK_PYTHON", sys.executable)  # workers run this interpreter
    running = SparkSession.getActiveSession()
    session = (
        SparkSession.builder.master("local[2]")
        .appName("dbmetrics tests")
        .config("spark.ui.enabled", "false")
        .config("spark.sql.shuffle.partitions", "4")
        .config("spark.default.parallelism", "2")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    if running is None:
        session.stop()


@pytest.fixture(scope="module")
def log_folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("hard_log")
    hard_log(folder)
    return folder


@pytest.fixture(scope="module", params=list(CASES))
def both_stores(request, spark, log_folder, tmp_path_factory):
    """The hard log turned into a store by Spark and by `partials update`."""
    params = params_for(log_folder, request.param)
    out = tmp_path_factory.mktemp("stores")
    by_duckdb = duckdb_update(params, out / "duckdb")
    by_spark = spark_update(spark, params, out / "spark")
    return out / "duckdb", out / "spark", by_duckdb, by_spark


def test_spark_and_duckdb_write_equal_state_files(both_stores):
    by_duckdb, by_spark, summary_duckdb, summary_spark = both_stores
    assert summary_spark == {**summary_duckdb, "store": str(by_spark)}
    assert_same_stores(by_duckdb, by_spark)


def test_every_saved_query_returns_the_same_table_on_both_stores(con, same_table, both_stores):
    by_duckdb, by_spark, _, _ = both_stores
    expected, got = saved_query_tables(con, by_duckdb), saved_query_tables(con, by_spark)
    assert expected.keys() == got.keys()
    assert any(isinstance(t, pa.Table) for t in expected.values())
    for name, table in expected.items():
        if isinstance(table, str):
            assert got[name] == table.replace(str(by_duckdb), str(by_spark)), name
        else:
            same_table(table, got[name])


def test_spark_refuses_what_partials_update_refuses_with_the_same_words(
    spark, log_folder, tmp_path
):
    params = params_for(log_folder, "logits, late text labels")
    for bad in (
        {"scores_col": "nope"},
        {"grain": "week"},
        {"id_col": ""},
        {"bins": "0"},
        {"timezone": "Mars/Olympus"},
    ):
        with pytest.raises(DbmetricsError) as by_duckdb:
            duckdb_update({**params, **bad}, tmp_path / "a")
        with pytest.raises(DbmetricsError) as by_spark:
            spark_update(spark, {**params, **bad}, tmp_path / "b")
        assert str(by_spark.value) == str(by_duckdb.value)


def test_the_states_as_spark_dataframes_are_the_store_rows(spark, log_folder, tmp_path):
    params = params_for(log_folder, "probs, inline labels")
    duckdb_update(params, tmp_path / "store")
    frames = state_frames(spark, {**params, "timezone": TIMEZONE})
    assert sorted(frames) == sorted(k.name for k in kinds.STATE_KINDS)
    for kind, df in frames.items():
        files = day_files(tmp_path / "store", kind).values()
        expected = pa.concat_tables(pq.read_table(f) for f in files)
        got = kinds.conform(kind, df.toArrow())
        assert_same_rows(expected, got, kind)


def split_log(folder, out, cut_days):
    """The hard log as daily files logs_DAY.parquet (UTC days) and label tables as they were
    known at the end of each of `cut_days` days (labels_DAY.parquet)."""
    logs = pq.read_table(folder / "logs.parquet")
    labels = pq.read_table(folder / "labels.parquet")
    out.mkdir()
    for i in range(DAYS):
        lo, hi = START + dt.timedelta(days=i), START + dt.timedelta(days=i + 1)
        rows = logs.filter(pc.and_(pc.greater_equal(logs["ts"], lo), pc.less(logs["ts"], hi)))
        pq.write_table(rows, out / f"logs_{i}.parquet")
    for i in cut_days:
        known = pc.less(labels["labelled_at"], START + dt.timedelta(days=i + 1))
        pq.write_table(labels.filter(known), out / f"labels_{i}.parquet")


def test_a_spark_backfill_then_daily_duckdb_updates_equal_duckdb_alone(spark, log_folder, tmp_path):
    """The backfill has the Spark tasks write the day files; the daily updates recompute
    only the last two days, so the older days stay as Spark wrote them."""
    split_log(log_folder, tmp_path / "log", cut_days=range(5, DAYS))
    for i in range(6, DAYS):
        (tmp_path / "log" / f"logs_{i}.parquet").rename(tmp_path / "log" / f"later_{i}.parquet")
    case = dict(CASES["logits, late text labels"], labels=str(tmp_path / "log" / "labels.parquet"))
    params = {"logs": str(tmp_path / "log" / "logs_*.parquet"), "time_col": "ts", **case}
    mixed, alone = tmp_path / "mixed", tmp_path / "alone"

    def labels_known_on(i):
        (tmp_path / "log" / f"labels_{i}.parquet").replace(tmp_path / "log" / "labels.parquet")

    labels_known_on(5)
    spark_update(spark, params, mixed, write_from="workers")
    duckdb_update(params, alone)
    assert_same_stores(alone, mixed)
    assert duckdb_update(params, mixed)["days_written"] == 0  # same day fingerprints
    assert_same_stores(alone, mixed)
    for i in range(6, DAYS):
        (tmp_path / "log" / f"later_{i}.parquet").rename(tmp_path / "log" / f"logs_{i}.parquet")
        labels_known_on(i)
        for store in (mixed, alone):
            duckdb_update(params, store, relabel_days=2)
        assert_same_stores(alone, mixed)
    written_by_spark = [
        p for p in day_files(mixed, "state").values() if p.name.endswith(".1.parquet")
    ]
    assert len(written_by_spark) >= 3


def test_a_spark_job_killed_before_its_commit_leaves_the_store_and_is_cleaned_up(
    spark, log_folder, tmp_path, monkeypatch, same_table
):
    params = params_for(log_folder, "binary probability")
    store = tmp_path / "store"
    duckdb_update(params, store)
    con = dbmetrics.connect()
    before = run_query(con, "rollup", {"partials": str(store)})
    manifest = (store / "manifest.json").read_text()

    def killed(self, *args, **kwargs):
        raise KeyboardInterrupt  # the files are staged, the manifest not yet swapped

    def dies(self):
        os.close(self._lock)  # the OS releases a dead process's lock; its files stay

    monkeypatch.setattr(Publisher, "commit", killed)
    monkeypatch.setattr(Publisher, "close", dies)
    with pytest.raises(KeyboardInterrupt):
        spark_update(spark, params, store, full=True, write_from="workers")
    monkeypatch.undo()
    staged = list(store.glob(".staging/*/*.tmp"))
    assert len(staged) == len(kinds.STATE_KINDS) * len(day_files(store, "state"))  # every kind
    assert (store / "manifest.json").read_text() == manifest
    same_table(before, run_query(con, "rollup", {"partials": str(store)}))
    assert duckdb_update(params, store)["days_written"] == 0
    assert not list(store.glob(".staging/*"))
    same_table(before, run_query(con, "rollup", {"partials": str(store)}))
    con.close()


def test_a_duckdb_update_committed_during_the_spark_job_is_kept_and_spark_refused(
    spark, log_folder, tmp_path, monkeypatch
):
    params = params_for(log_folder, "binary probability")
    store, reference = tmp_path / "store", tmp_path / "reference"
    duckdb_update(params, store)
    original = Publisher.commit
    ran = []

    def duckdb_commits_first(self, *args, **kwargs):
        if not ran:  # a DuckDB update runs while the Spark job stages its files
            ran.append(True)
            duckdb_update(params, store, full=True)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(Publisher, "commit", duckdb_commits_first)
    with pytest.raises(DbmetricsError, match="moved from generation 1 to 2"):
        spark_update(spark, params, store, full=True)
    monkeypatch.undo()
    assert ran and json.loads((store / "manifest.json").read_text())["generation"] == 2
    assert not list(store.glob(".staging/*"))
    duckdb_update(params, reference, full=True)
    assert_same_stores(reference, store)


def test_a_store_refuses_a_spark_update_in_another_time_zone(spark, log_folder, tmp_path):
    params = params_for(log_folder, "binary probability")
    duckdb_update({**params, "timezone": "UTC"}, tmp_path / "store")
    with pytest.raises(DbmetricsError) as by_duckdb:
        duckdb_update(params, tmp_path / "store")
    with pytest.raises(DbmetricsError, match="built with timezone='UTC'") as by_spark:
        spark_update(spark, params, tmp_path / "store")
    assert str(by_spark.value) == str(by_duckdb.value)


def test_the_command_line_updates_a_store_and_prints_its_summary(spark, log_folder, tmp_path):
    from click.testing import CliRunner

    from dbmetrics.spark.__main__ import cli

    params = params_for(log_folder, "binary probability")
    settings = [f"--set={k}={v}" for k, v in {**params, "timezone": TIMEZONE}.items()]
    runner = CliRunner()
    result = runner.invoke(cli, ["update", "--store", str(tmp_path / "spark"), *settings])
    assert result.exit_code == 0, result.output
    summary = json.loads(result.output.strip().splitlines()[-1])
    assert summary == {**duckdb_update(params, tmp_path / "duckdb"), "store": summary["store"]}
    assert_same_stores(tmp_path / "duckdb", tmp_path / "spark")
    bad = runner.invoke(cli, ["update", "--store", str(tmp_path / "x"), *settings, "--set=bins=0"])
    assert bad.exit_code == 1 and "parameter `bins` must lie in" in bad.output
