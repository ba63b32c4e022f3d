"""The numpy engine (large batches) and the UDF route (2048 rows a call) are one computation.

Specification: every template returns the same table whether its additive states come from
the engine (run_query, the default) or from the SQL with one UDF call per row (the SQL that
render_query shows); a failure inside the engine's stream is reported as DuckDB words it.
"""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries import render_query, run_query
from dbmetrics.queries.engine import BATCH_ROWS


def awkward_log(path, n=2 * BATCH_ROWS + 123, seed=5, ks=(3, 4)):
    """More than two engine batches; ragged K, NULL/NaN/-inf scores, NULL and bad labels."""
    rng = np.random.default_rng(seed)
    ks = rng.choice(ks, n)
    logits = [list(rng.normal(size=k) * 3) for k in ks]
    labels = [int(rng.integers(0, k)) for k in ks]
    for i in rng.choice(n, min(300, n // 3), replace=False):
        kind = i % 5
        if kind == 0:
            logits[i] = None
        elif kind == 1:
            logits[i][0] = float("nan")
        elif kind == 2:
            logits[i][labels[i]] = float("-inf")
        elif kind == 3:
            labels[i] = None
        else:
            labels[i] = 9
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(
                    [
                        dt.datetime(2026, 1, 5) + dt.timedelta(minutes=int(m))
                        for m in rng.integers(0, 60 * 24 * 28, n)
                    ],
                    pa.timestamp("us"),
                ),
                "model_version": rng.choice(["v1", "v2"], n),
                "region": rng.choice(["a", "b", "c"], n),
                "logits": pa.array(logits, pa.list_(pa.float32())),
                "label": pa.array(labels, pa.int64()),
            }
        ),
        path,
    )
    return str(path)


@pytest.mark.parametrize(
    "query",
    ["rollup", "calibration", "drift", "class_metrics", "confusion", "class_calibration"],
)
def test_the_engine_equals_the_udf_route(con, tmp_path, query, same_table):
    params = (
        {"logs": awkward_log(tmp_path / "log.parquet"), "segment_cols": "region", "min_rows": "50"}
        if query == "drift"
        else {"logs": awkward_log(tmp_path / "log.parquet"), "segment_cols": "region"}
    )
    engine = run_query(con, query, params)
    sql, bound = render_query(con, query, params)  # the per-row UDF SQL
    same_table(con.sql(sql, params=bound).to_arrow_table(), engine)


def test_the_engine_equals_the_udf_route_on_two_class_logs(con, tmp_path, same_table):
    params = {"logs": awkward_log(tmp_path / "log.parquet", ks=(2,)), "segment_cols": "region"}
    engine = run_query(con, "binary", params)
    assert engine.num_rows > 0
    sql, bound = render_query(con, "binary", params)
    same_table(con.sql(sql, params=bound).to_arrow_table(), engine)


def test_a_file_that_breaks_the_stream_is_named(con, tmp_path):
    good = awkward_log(tmp_path / "a.parquet", n=100)
    raw = bytearray((tmp_path / "a.parquet").read_bytes())
    raw[200:260] = b"\x0f" * 60  # inside the first data page; the footer stays valid
    (tmp_path / "b.parquet").write_bytes(bytes(raw))
    with pytest.raises(DbmetricsError, match="b.parquet"):
        run_query(con, "rollup", {"logs": str(tmp_path / "*.parquet")})
    assert run_query(con, "rollup", {"logs": good}).num_rows > 0


def test_the_three_routes_give_one_state(con, tmp_path, same_table):
    # The numpy engine, DuckDB's SQL (sql_row_stats) and the per-row UDF compute STATE from
    # the same rows; +inf logits and all-masked rows join the awkward log's cases.
    from dbmetrics.queries.engine import partial_states
    from dbmetrics.queries.render import render_query as render
    from dbmetrics.queries.roles import column_roles
    from dbmetrics.queries.schema import open_source
    from dbmetrics.queries.state_sql import nested, sql_row_stats, state

    awkward_log(tmp_path / "log.parquet")
    extra = tmp_path / "more.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 6)] * 3, pa.timestamp("us")),
                "model_version": ["v1"] * 3,
                "region": ["a"] * 3,
                "logits": pa.array(
                    [[1.0, float("inf"), 0.0], [float("-inf")] * 3, [1e4, -1e4, 0.0]],
                    pa.list_(pa.float32()),
                ),
                "label": pa.array([0, 1, 2], pa.int64()),
            }
        ),
        extra,
    )
    logs = str(tmp_path / "*.parquet")
    render(con, "rollup", {"logs": logs, "segment_cols": "region"})  # checks the parameters
    texts = {
        "logs": logs,
        "time_col": "ts",
        "scores_col": "logits",
        "scores_kind": "logits",
        "label_col": "label",
        "version_col": "model_version",
        "segment_cols": "region",
        "labels": None,
        "id_col": None,
        "classes": None,
    }
    source = open_source(con, "logs", logs)
    roles = column_roles(texts, {"logs": source}, set())
    values = {"bins": 15, "classes": None, **source.bound}
    udf_sql = state(roles)
    sql_sql = state(roles, rows=nested(sql_row_stats(roles)))
    udf = con.sql(udf_sql, params={k: values[k] for k in ("bins", *source.bound)}).to_arrow_table()
    via_sql = con.sql(
        sql_sql, params={k: values[k] for k in ("bins", *source.bound)}
    ).to_arrow_table()
    engine = partial_states(con, roles, values)["state"]
    same_table(udf, via_sql)
    same_table(udf, engine)
    assert sum(udf.column("invalid_scores").to_pylist()) > 0


def test_the_route_is_chosen_by_kind_classes_and_row_length(con, tmp_path, monkeypatch):
    from dbmetrics.queries.engine import state_route
    from dbmetrics.queries.roles import column_roles
    from dbmetrics.queries.schema import open_source

    path = awkward_log(tmp_path / "log.parquet", n=50)
    source = open_source(con, "logs", path)
    texts = {
        "time_col": "ts",
        "scores_col": "logits",
        "label_col": "label",
        "version_col": "model_version",
        "segment_cols": "",
        "labels": None,
        "id_col": None,
        "classes": None,
    }
    logits = column_roles({**texts, "scores_kind": "logits"}, {"logs": source}, set())
    probs = column_roles({**texts, "scores_kind": "probs"}, {"logs": source}, set())
    assert state_route(con, logits, source.bound, classes=False) == "engine"  # K <= SHORT_K
    assert state_route(con, logits, source.bound, classes=True) == "engine"
    assert state_route(con, probs, source.bound, classes=False) == "engine"  # K <= SHORT_K
    long_rows = awkward_log(tmp_path / "long.parquet", n=50, ks=(100,))
    long_source = open_source(con, "logs", long_rows)
    long_logits = column_roles({**texts, "scores_kind": "logits"}, {"logs": long_source}, set())
    for jit in ("0", "1"):  # long rows go to the UDF route, with or without numba
        monkeypatch.setenv("DBMETRICS_JIT", jit)
        assert state_route(con, long_logits, long_source.bound, classes=False) == "udf"
