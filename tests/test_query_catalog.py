"""Saved-query headers, discovery of user folders, and the rules a header must follow."""

import datetime as dt
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics import DbmetricsError
from dbmetrics.queries import get_query, list_queries, render_query, run_query, scan_queries
from dbmetrics.queries.catalog import BUILT_IN
from dbmetrics.queries.header import COLUMN_MAP

USER_QUERY = """\
-- name: {name}
-- summary: Rows per version, from the shared state.
-- param logs (source, required): prediction log
-- param time_col (column, default ts): time
-- param scores_col (column, default logits): scores
-- param scores_kind (choice(logits|probs|binary_logit|binary_prob), default logits): kind
-- param label_col (column, default label): label
-- param version_col (column, default model_version): version
-- param segment_cols (columns): segments
-- param labels (source): label table
-- param id_col (column): id
-- param classes (text): class names
-- param bins (integer(1..1000), default 15): bins
-- param min_rows (integer, default 0): keep versions with at least this many rows
-- output rows: rows
-- example: dbmetrics run {name} --set logs=logs/
SELECT {{{{version_col}}}}, sum(rows)::BIGINT AS rows
FROM ({{{{state}}}})
GROUP BY ALL
HAVING sum(rows) >= $min_rows
"""


def write(folder, name, text=None):
    folder.mkdir(exist_ok=True)
    (folder / f"{name}.sql").write_text(text or USER_QUERY.format(name=name))
    return folder


@pytest.fixture
def logs(tmp_path):
    path = tmp_path / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5)] * 3, pa.timestamp("us")),
                "model_version": ["v1", "v1", "v2"],
                "logits": [[0.0, 1.0]] * 3,
                "label": [1, 0, 1],
            }
        ),
        path,
    )
    return str(path)


def test_built_in_queries_and_their_header():
    queries = {q.name: q for q in list_queries()}
    assert set(queries) == {
        "rollup",
        "calibration",
        "drift",
        "segments",
        "recalibration",
        "class_metrics",
        "confusion",
        "class_calibration",
        "binary",
        "labels",
        "version_gap",
    }
    grain = queries["rollup"].param("grain")
    assert (grain.type, grain.choices, grain.default, grain.required) == (
        "choice(day|week|month)",
        ("day", "week", "month"),
        "week",
        False,
    )
    assert not queries["rollup"].param("logs").required  # logs or partials: checked when rendering
    assert queries["drift"].param("ref_start").default is None
    assert all(q.origin == "built-in" and q.path.parent == BUILT_IN for q in queries.values())


def test_every_template_declares_the_same_column_roles():
    """One wording per shared parameter (segments narrows segment_cols to its join)."""
    declared = {
        q.name: {p.name: p for p in q.params if p.name in COLUMN_MAP + ("grain",)}
        for q in list_queries()
    }
    rollup = declared["rollup"]
    for name, params in declared.items():
        assert set(params) == set(rollup)
        for p in params.values():
            if (name, p.name) != ("segments", "segment_cols"):
                assert p == rollup[p.name], (name, p.name)


def test_user_folder_and_env_var_are_searched(tmp_path, monkeypatch, logs):
    monkeypatch.setenv("DBMETRICS_QUERY_PATH", str(write(tmp_path / "env", "from_env")))
    dirs = [write(tmp_path / "mine", "per_version")]
    found = {q.name: q.origin for q in list_queries(dirs)}
    assert found["per_version"] == found["from_env"] == "user"
    assert found["rollup"] == "built-in"
    con = dbmetrics.connect()
    out = run_query(con, "per_version", {"logs": logs, "min_rows": "2"}, dirs)
    assert out.to_pylist() == [{"model_version": "v1", "rows": 2}]


def test_user_query_may_not_shadow_a_built_in(tmp_path):
    with pytest.raises(DbmetricsError, match="query `rollup` is defined twice: .*rollup.sql"):
        get_query("rollup", [write(tmp_path / "mine", "rollup")])


def test_unknown_query_lists_the_names():
    with pytest.raises(
        DbmetricsError,
        match="no saved query `rolup`; queries are: "
        "binary, calibration, class_calibration, class_metrics, confusion, drift, labels, "
        "recalibration, rollup, segments, version_gap",
    ):
        get_query("rolup")


def test_missing_folder_is_an_error(tmp_path):
    with pytest.raises(DbmetricsError, match="does not exist"):
        list_queries([tmp_path / "nowhere"])


@pytest.mark.parametrize(
    "change,message",
    [
        (
            ("HAVING sum(rows) >= $min_rows", "HAVING sum(rows) >= $limit"),
            "uses $limit but the header declares no parameter `limit`",
        ),
        (
            ("SELECT {{version_col}}", "SELECT {{region}}"),
            "placeholder {{region}} is neither a declared source/column parameter",
        ),
        (
            ("-- param bins (integer(1..1000), default 15): bins", "-- param bins (text): bins"),
            "parameter `bins` is a column role and must have type integer(1..1000) (as in "
            "rollup); got `text`",
        ),
        (
            ("-- example: dbmetrics run bad --set logs=logs/\n", ""),
            "header lacks `-- example: ...`",
        ),
        (("(integer, default 0)", "(whole, default 0)"), "unknown type `whole`"),
        (("(integer, default 0)", "(integer, 0)"), "should be `default VALUE` or `required`"),
        (
            (
                "choice(logits|probs|binary_logit|binary_prob), default logits",
                "choice(logits|probs), default scores",
            ),
            "defaults to `scores`, not one of logits|probs",
        ),
        (("-- name: bad", "-- name: other"), "must be lower-case letters, digits and _ and match"),
        (("-- output rows: rows", "-- outputs rows: rows"), "is not one of name:, summary:"),
    ],
)
def test_malformed_user_queries_are_rejected(tmp_path, change, message):
    text = USER_QUERY.format(name="bad").replace(*change)
    dirs = [write(write(tmp_path / "mine", "bad", text), "good")]
    with pytest.raises(DbmetricsError) as err:
        get_query("bad", dirs)
    assert message in str(err.value) and "bad.sql" in str(err.value)
    queries, broken = scan_queries(dirs)
    assert "good" in {q.name for q in queries} and "bad" not in {q.name for q in queries}
    assert [(b.path.name, b.problem) for b in broken] == [("bad.sql", str(err.value))]


def test_continuation_lines_extend_an_entry(tmp_path):
    text = USER_QUERY.format(name="long").replace(
        "-- param min_rows (integer, default 0): keep versions with at least this many rows\n",
        "-- param min_rows (integer, default 0): keep versions\n--    with at least this many rows\n",
    )
    info = get_query("long", [write(tmp_path / "mine", "long", text)])
    assert info.param("min_rows").help == "keep versions with at least this many rows"


def test_a_query_can_include_another(tmp_path, logs):
    text = USER_QUERY.format(name="wrapped").replace(
        "SELECT {{version_col}}, sum(rows)::BIGINT AS rows\nFROM ({{state}})\nGROUP BY ALL\n"
        "HAVING sum(rows) >= $min_rows\n",
        "SELECT * FROM ({{query:per_version}}) WHERE rows >= $min_rows\n",
    )
    dirs = [write(write(tmp_path / "mine", "per_version"), "wrapped", text)]
    con = dbmetrics.connect()
    sql, bound = render_query(con, "wrapped", {"logs": logs, "min_rows": "1"}, dirs)
    assert "{{" not in sql and set(bound) == {"logs", "bins", "min_rows"}
    assert len(run_query(con, "wrapped", {"logs": logs, "min_rows": "1"}, dirs)) == 2


@pytest.mark.parametrize(
    "query",
    [
        "rollup",
        "calibration",
        "drift",
        "segments",
        "recalibration",
        "class_metrics",
        "confusion",
        "class_calibration",
        "version_gap",
    ],
)
def test_header_example_runs_on_the_demo_logs(query, monkeypatch):
    """The `-- example:` line is a working command (run from the repository root)."""
    root = Path(__file__).resolve().parents[1]
    monkeypatch.chdir(root)
    words = get_query(query).example.split()
    assert words[:3] == ["dbmetrics", "run", query] and words[3::2] == ["--set"] * (
        len(words[3:]) // 2
    )
    params = dict(w.split("=", 1) for w in words[4::2])
    assert run_query(dbmetrics.connect(), query, params).num_rows > 0


INCLUDING = """\
-- name: {name}
-- summary: Rows per version, the column roles included.
-- include: column_roles
-- param segment_cols (columns): narrowed here
-- param min_rows (integer, default 0): keep versions with at least this many rows
-- output rows: rows
-- example: dbmetrics run {name} --set logs=logs/
SELECT {{{{version_col}}}}, sum(rows)::BIGINT AS rows
FROM ({{{{state}}}})
GROUP BY ALL
HAVING sum(rows) >= $min_rows
"""


def test_include_column_roles_declares_them_once(tmp_path, logs):
    """`-- include: column_roles` stands for the shared definitions (role_params.py); a
    parameter the query declares itself replaces the included one, in its own place."""
    from dbmetrics.queries.header import column_role_params

    folder = write(tmp_path / "mine", "included", INCLUDING.format(name="included"))
    info = get_query("included", [folder])
    shared = {p.name: p for p in column_role_params()}
    names = [p.name for p in info.params]
    assert set(COLUMN_MAP) <= set(names) and names.count("segment_cols") == 1
    assert info.param("segment_cols").help == "narrowed here"
    assert info.param("timezone") == shared["timezone"] == get_query("rollup").param("timezone")
    con = dbmetrics.connect()
    out = run_query(con, "included", {"logs": logs, "timezone": "Asia/Tokyo"}, [folder])
    rows = sorted(out.to_pylist(), key=lambda r: r["model_version"])
    assert rows == [{"model_version": "v1", "rows": 2}, {"model_version": "v2", "rows": 1}]
    write(folder, "wrong", INCLUDING.format(name="wrong").replace("column_roles", "roles"))
    with pytest.raises(DbmetricsError, match="`-- include: roles` names no parameter set"):
        get_query("wrong", [folder])
