"""Parameters never reach SQL as text: hostile values are refused or bound; errors say why."""

import datetime as dt

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics import DbmetricsError
from dbmetrics.queries import get_query, list_queries, render_query, run_query

HOSTILE = [
    "x'; DROP TABLE canary; --",
    'label" ; DROP TABLE canary; --',
    "ts /* comment */ ",
    "1) UNION SELECT * FROM canary --",
    "$logs {{state}}",
    "canary",
]


@pytest.fixture(scope="module")
def con():
    return dbmetrics.connect()


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    path = tmp_path_factory.mktemp("safety") / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5, 9)] * 3, pa.timestamp("us")),
                "model_version": ["v1"] * 3,
                "region": ["a", "b", "a"],
                "logits": pa.array([[0.1, 2.0], [1.0, -1.0], [0.0, 0.0]], pa.list_(pa.float32())),
                "label": [1, 0, None],
            }
        ),
        path,
    )
    (path.parent / "biz.csv").write_text("region,tier\na,gold\nb,silver\n")
    return str(path)


def base(name, logs):
    params = {"logs": logs}
    if name == "segments":
        params.update(segment_cols="region", business=logs.replace("logs.parquet", "biz.csv"))
    if name == "version_gap":  # two versions to compare
        params.update(version_col="region")
    return params


CASES = [(q.name, p.name) for q in list_queries() for p in q.params]


@pytest.mark.parametrize("query,param", CASES)
@pytest.mark.parametrize("text", HOSTILE)
def test_hostile_text_is_refused_or_bound(con, logs, query, param, text):
    con.sql("CREATE OR REPLACE TABLE canary AS SELECT 42 AS x")
    params = {**base(query, logs), param: text}
    try:
        sql, bound = render_query(con, query, params)
    except DbmetricsError as exc:
        assert str(exc) and "\n" not in str(exc)
    else:
        # accepted: the text is a bound value only; the SQL is what a plain value gives
        assert bound[param] == text.strip()  # surrounding blanks are trimmed
        assert sql == render_query(con, query, {**params, param: "plain"})[0]
        try:
            run_query(con, query, params)
        except DbmetricsError as exc:  # class names are counted against K only on the data,
            # and versions looked up there
            assert (param == "classes" and str(exc).startswith("classes: ")) or (
                param.startswith("version_") and f"{param}: no rows of version `" in str(exc)
            )
    assert con.sql("SELECT x FROM canary").fetchall() == [(42,)]


def test_wrong_column_lists_the_columns(con, logs):
    with pytest.raises(DbmetricsError) as err:
        run_query(con, "rollup", {"logs": logs, "label_col": "labels"})
    assert str(err.value) == (
        "label_col: column `labels` not found in logs; columns are: "
        "ts, model_version, region, logits, label"
    )


def test_wrong_segment_column_in_business_table(con, logs, tmp_path):
    (tmp_path / "biz.csv").write_text("area,tier\na,gold\n")
    with pytest.raises(
        DbmetricsError, match="column `region` not found in business; columns are: area, tier"
    ):
        run_query(
            con,
            "segments",
            {"logs": logs, "segment_cols": "region", "business": str(tmp_path / "biz.csv")},
        )


@pytest.mark.parametrize(
    "params,message",
    [
        (
            {"grain": "fortnight"},
            "parameter `grain` must be one of day, week, month; got `fortnight`",
        ),
        ({"bins": "0"}, "parameter `bins` must lie in 1..1000; got 0"),
        ({"bins": "15.5"}, "parameter `bins` expects a whole number; got `15.5`"),
        ({"nope": "1"}, "query `rollup` has no parameter nope"),
        ({"logs": ""}, "query `rollup` needs parameter `logs`"),
        ({"logs": "/no/such/*.parquet"}, "logs: `/no/such/*.parquet` is neither a table or view"),
        (
            {"time_col": "logits"},
            "time_col: column `logits` is FLOAT[]; expected a DATE or TIMESTAMP",
        ),
        (
            {"scores_kind": "binary_prob"},
            "scores_col: column `logits` is FLOAT[]; expected a single",
        ),
        ({"labels": "logs_table"}, "id_col: labels come from a separate table"),
        ({"segment_cols": "region, rows"}, "column `rows` not found in logs"),
    ],
)
def test_bad_parameters_get_one_line_errors(con, logs, params, message):
    con.sql(f"CREATE OR REPLACE VIEW logs_table AS SELECT * FROM read_parquet('{logs}')")
    with pytest.raises(DbmetricsError) as err:
        render_query(con, "rollup", {"logs": logs, **params})
    assert message in str(err.value)


def test_key_clashing_with_a_computed_column_is_refused(con, logs):
    con.sql(f"CREATE OR REPLACE VIEW clash AS SELECT *, region AS bin FROM read_parquet('{logs}')")
    with pytest.raises(DbmetricsError, match="clashes with a computed column"):
        render_query(con, "rollup", {"logs": "clash", "segment_cols": "bin"})


def test_only_used_values_are_bound(con, logs):
    sql, bound = render_query(con, "rollup", {"logs": logs})
    assert set(bound) == {"logs", "bins", "grain"}
    assert bound["logs"] == logs and bound["bins"] == 15
    assert '"model_version"' in sql and "$logs" in sql


def test_table_source_is_quoted_from_the_catalog(con, logs):
    con.sql(f'CREATE OR REPLACE VIEW "Odd ""name""" AS SELECT * FROM read_parquet(\'{logs}\')')
    sql, bound = render_query(con, "rollup", {"logs": 'odd "name"'})
    assert '"main"."Odd ""name"""' in sql and "logs" not in bound
    assert run_query(con, "rollup", {"logs": 'odd "name"'}).num_rows == 1


def test_every_template_documents_itself():
    for name in ("rollup", "calibration", "drift", "segments"):
        info = get_query(name)
        assert info.summary and info.example.startswith(f"dbmetrics run {name} ")
        assert all(p.help for p in info.params) and info.outputs
