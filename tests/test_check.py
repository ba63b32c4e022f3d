"""`dbmetrics check`: finds every planted problem in a dirty log, and nothing in a clean one."""

import datetime as dt
import json
import re
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

import dbmetrics
from dbmetrics import DbmetricsError
from dbmetrics.check import check_log
from dbmetrics.cli.main import cli
from dbmetrics.queries import run_query

DEMO = Path(__file__).resolve().parent.parent / "demo_parquet"
NAN, INF = float("nan"), float("inf")
SCHEMA = pa.schema(
    [
        ("id", pa.string()),
        ("ts", pa.timestamp("us")),
        ("model_version", pa.string()),
        ("logits", pa.list_(pa.float32())),
        ("label", pa.int64()),
        ("target", pa.list_(pa.float64())),
    ]
)
START = dt.datetime(2026, 1, 5, 9)


def good(i, **changes):
    """A row every check passes: id p<i>, a later time for a later i, K = 3."""
    row = {
        "id": f"p{i}",
        "ts": START + dt.timedelta(minutes=i),
        "model_version": "v1",
        "logits": [0.5, -1.0, 2.0],
        "label": i % 3,
        "target": [0.2, 0.3, 0.5],
    }
    return {**row, **changes}


def write(path, rows, schema=SCHEMA):
    path.parent.mkdir(parents=True, exist_ok=True)
    pq.write_table(pa.Table.from_pylist(rows, schema), path)
    return str(path)


def counts(report):
    """reason -> count, for the reasons with a non-zero count."""
    return {i.reason: i.count for i in report.issues if i.count}


def problems(report):
    return {i.reason: i.count for i in report.issues if i.count and i.problem}


@pytest.fixture
def con():
    connection = dbmetrics.connect()
    yield connection
    connection.close()


@pytest.fixture
def dirty(tmp_path):
    """Two files with every row-level problem planted a known number of times."""
    rows = [good(i) for i in range(10)] + [
        good(10, logits=None),
        good(11, logits=[]),  # missing_scores 2
        good(12, logits=[1.0, None, 2.0]),  # null_in_scores 1
        good(13, logits=[NAN, 0.0, 1.0]),
        good(14, logits=[0.0, NAN, NAN]),  # nan_scores 2
        good(15, logits=[INF, 0.0, 0.0]),
        good(16, logits=[-INF, -INF, -INF]),  # infinite 2
        good(17, logits=[1.0, 2.0, 3.0, 4.0], target=[0.25] * 4),  # k_differs 2
        good(18, logits=[0.0] * 4, target=[0.25] * 4),
        good(19, label=None),
        good(20, label=None),  # unlabelled 2 (info)
        good(21, label=7),
        good(22, label=-1),  # label_out_of_range 2
        good(23, ts=None),  # null_timestamps 1
        good(24, model_version=None),  # null_versions 1
        good(25, id="p0"),
        good(26, id="p0"),
        good(27, id="p1"),  # duplicate_ids 3 (2 ids)
        good(28, id=None),  # null_ids 1
        good(29, target=None),  # no_target (info)
        good(30, target=[0.5, 0.6, 0.1]),  # target_not_summing_to_1
        good(31, target=[-0.1, 0.6, 0.5]),  # target_negative
        good(32, target=[0.5, 0.5]),  # target_length_differs
        good(33, target=[NAN, 0.5, 0.5]),  # target_not_finite
    ]
    later = [good(100 + i, model_version="v2") for i in range(6)]
    later[2]["ts"], later[4]["ts"] = START, START  # out_of_order 2
    write(tmp_path / "logs" / "a.parquet", rows)
    write(tmp_path / "logs" / "b.parquet", later)
    return str(tmp_path / "logs")


DIRTY = {
    "missing_scores": 2,
    "null_in_scores": 1,
    "nan_scores": 2,
    "infinite_scores": 2,
    "k_differs": 2,
    "label_out_of_range": 2,
    "null_timestamps": 1,
    "null_versions": 1,
    "out_of_order": 2,
    "duplicate_ids": 3,
    "null_ids": 1,
    "target_not_summing_to_1": 1,
    "target_negative": 1,
    "target_length_differs": 1,
    "target_not_finite": 1,
}


def test_every_planted_problem_is_found_exactly(con, dirty):
    report = check_log(con, {"logs": dirty, "id_col": "id", "target_col": "target"})
    assert problems(report) == DIRTY
    assert counts(report) == {**DIRTY, "unlabelled": 2, "no_target": 1}
    assert not report.clean
    assert next(i for i in report.issues if i.reason == "duplicate_ids").detail == "2 ids"


def test_per_file_counts_name_the_file_with_the_out_of_order_rows(con, dirty):
    report = check_log(con, {"logs": dirty})
    by_file = {Path(f.file).name: (f.rows, f.null_timestamps, f.out_of_order) for f in report.files}
    assert by_file == {"a.parquet": (34, 1, 0), "b.parquet": (6, 0, 2)}


def test_classes_per_version_give_the_usual_k_and_the_odd_rows(con, dirty):
    report = check_log(con, {"logs": dirty})
    classes = {c.version: (c.rows, c.usual_k, c.other_k_rows, c.k_seen) for c in report.classes}
    # v1: 34 rows - 2 missing - 1 NULL version = 31 with a K, two of them K = 4
    assert classes == {"v1": (31, 3, 2, (3, 4)), "v2": (6, 3, 0, (3,)), None: (1, 3, 0, (3,))}


def test_rows_per_period_and_version(con, dirty):
    report = check_log(con, {"logs": dirty, "grain": "day"})
    assert report.periods == (
        (dt.date(2026, 1, 5), "v1", 32),
        (dt.date(2026, 1, 5), "v2", 6),
        (dt.date(2026, 1, 5), None, 1),
        (None, "v1", 1),
    )


def test_the_check_agrees_with_the_rollup_on_what_it_counts(con, dirty):
    """missing = missing_scores; invalid = NULL inside + NaN + infinite; bad labels likewise."""
    report = counts(check_log(con, {"logs": dirty}))
    rollup = run_query(con, "rollup", {"logs": dirty, "grain": "month"})
    total = {
        c: sum(rollup[c].to_pylist())
        for c in ("rows", "labelled_rows", "missing_scores", "invalid_scores", "bad_labels")
    }
    assert total == {
        "rows": 40,
        "labelled_rows": 38,
        "missing_scores": report["missing_scores"],
        "invalid_scores": report["null_in_scores"]
        + report["nan_scores"]
        + report["infinite_scores"],
        "bad_labels": report["label_out_of_range"],
    }


def test_probabilities_negative_or_not_summing_to_one(con, tmp_path):
    schema = pa.schema(
        [
            ("ts", pa.date32()),
            ("model_version", pa.string()),
            ("p", pa.list_(pa.float64())),
            ("label", pa.int8()),
        ]
    )
    day = dt.date(2026, 1, 5)
    rows = [
        {"ts": day, "model_version": "v1", "p": p, "label": 0}
        for p in ([0.2, 0.8], [0.5, 0.5009], [-0.1, 1.1], [0.6, 0.6], [INF, 0.0], [0.5, 0.5])
    ]
    logs = write(tmp_path / "p.parquet", rows, schema)
    params = {"logs": logs, "scores_col": "p", "scores_kind": "probs"}
    assert problems(check_log(con, params)) == {
        "negative_probs": 1,
        "probs_not_summing_to_1": 1,
        "infinite_scores": 1,
    }
    loose = check_log(con, {**params, "tolerance": "0.5"})
    assert problems(loose) == {"negative_probs": 1, "infinite_scores": 1}
    assert sum(run_query(con, "rollup", params)["invalid_scores"].to_pylist()) == 3


def test_class_names_unknown_to_classes(con, tmp_path):
    schema = pa.schema(
        [
            ("ts", pa.timestamp("ms")),
            ("model_version", pa.string()),
            ("logits", pa.list_(pa.float64(), 3)),
            ("label", pa.string()),
        ]
    )
    rows = [
        {"ts": START, "model_version": "v1", "logits": [0.0, 1.0, 2.0], "label": y}
        for y in ("cat", "dog", "zebra", None, "eel")
    ]
    logs = write(tmp_path / "named.parquet", rows, schema)
    report = check_log(con, {"logs": logs, "classes": "cat, dog, eel"})
    assert counts(report) == {"unknown_class": 1, "unlabelled": 1}


def test_a_separate_labels_table(con, tmp_path):
    logs = write(tmp_path / "logs.parquet", [good(i) for i in range(5)])
    labels = write(
        tmp_path / "labels.parquet",
        [
            {"id": "p0", "label": 0},
            {"id": "p1", "label": 1},
            {"id": "p1", "label": 2},
            {"id": "p2", "label": None},
            {"id": None, "label": 1},
            {"id": "p3", "label": -1},
            {"id": "zz", "label": 0},
            {"id": "zz", "label": 0},
        ],
        pa.schema([("id", pa.string()), ("label", pa.int32())]),
    )
    report = check_log(con, {"logs": logs, "labels": labels, "id_col": "id"})
    assert counts(report) == {
        "unlabelled": 2,  # p2 (NULL label) and p4 (no label row)
        "label_conflict_or_unknown": 2,  # p1 (1 and 2) and p3 (-1)
        "null_label_ids": 1,
        "null_labels": 1,
        "negative_labels": 1,
        "conflicting_label_ids": 1,
        "orphan_labels": 2,
    }
    assert any(n.startswith("labels table: 8 rows") for n in report.notes)


def test_null_labels_are_a_problem_only_when_required(con, tmp_path):
    logs = write(tmp_path / "logs.parquet", [good(0), good(1, label=None)])
    assert check_log(con, {"logs": logs}).clean
    strict = check_log(con, {"logs": logs, "require_labels": "yes"})
    assert problems(strict) == {"unlabelled": 1} and not strict.clean


def test_a_label_free_log_skips_the_label_checks(con, tmp_path):
    logs = write(tmp_path / "logs.parquet", [good(0), good(1)])
    report = check_log(con, {"logs": logs, "label_col": ""})
    assert report.clean and not any(i.check == "labels" for i in report.issues)
    assert "labels not checked: label_col is empty" in report.notes


def test_the_demo_has_exactly_its_23_null_and_4_nan_rows():
    con = dbmetrics.connect()
    report = check_log(
        con,
        {
            "logs": str(DEMO / "logs"),
            "id_col": "prediction_id",
            "labels": str(DEMO / "labels" / "labels.parquet"),
        },
    )
    assert problems(report) == {"missing_scores": 23, "nan_scores": 4}
    assert [c.usual_k for c in report.classes] == [6, 6] and report.drift == ()
    assert sum(f.rows for f in report.files) == 45_500 == sum(n for _, _, n in report.periods)


@pytest.fixture
def clean(tmp_path):
    """A generated log: three monthly files, two versions, K = 4, labels in range."""
    rng = np.random.default_rng(3)
    for month in (1, 2, 3):
        n = 400
        ts = np.datetime64(f"2026-0{month}-01T00:00") + np.sort(rng.integers(0, 2e6, n)).astype(
            "timedelta64[s]"
        )
        write(
            tmp_path / "logs" / f"month={month}" / "part.parquet",
            [
                {
                    "id": f"{month}-{i}",
                    "ts": t.astype(dt.datetime),
                    "model_version": f"v{1 + i % 2}",
                    "logits": rng.normal(size=4).tolist(),
                    "label": int(rng.integers(0, 4)),
                    "target": rng.dirichlet(np.ones(4)).tolist(),
                }
                for i, t in enumerate(ts)
            ],
        )
    return str(tmp_path / "logs")


def test_a_clean_generated_log_is_clean(con, clean):
    report = check_log(con, {"logs": clean, "id_col": "id", "target_col": "target"})
    assert report.clean and report.problems == [] and counts(report) == {}
    assert {c.version: c.usual_k for c in report.classes} == {"v1": 4, "v2": 4}


def test_a_table_source_is_checked_without_the_file_order(con, dirty):
    con.sql(f"CREATE TABLE preds AS SELECT * FROM read_parquet('{dirty}/*.parquet')")
    report = check_log(con, {"logs": "preds"})
    assert "out_of_order" not in counts(report) and report.files == ()
    assert problems(report)["missing_scores"] == 2
    assert any("out_of_order" in n for n in report.notes)


def test_compatible_type_changes_between_files_are_information(con, tmp_path):
    rows = [good(i) for i in range(4)]
    write(tmp_path / "logs" / "jan.parquet", rows, SCHEMA.set(4, pa.field("label", pa.int32())))
    write(
        tmp_path / "logs" / "feb.parquet",
        rows,
        SCHEMA.set(3, pa.field("logits", pa.list_(pa.float64()))),
    )
    report = check_log(con, {"logs": str(tmp_path / "logs")})
    assert report.clean
    assert sorted(d.column for d in report.drift) == ["label", "logits"]
    assert not any(d.problem for d in report.drift)
    assert "FLOAT[] in 1 file" in next(d.detail for d in report.drift if d.column == "logits")


def test_a_mapped_column_missing_from_some_files_is_a_problem(con, tmp_path):
    write(tmp_path / "logs" / "jan.parquet", [good(i) for i in range(4)])
    write(
        tmp_path / "logs" / "feb.parquet",
        [good(i) for i in range(4, 8)],
        SCHEMA.remove(SCHEMA.get_field_index("label")),
    )
    report = check_log(con, {"logs": str(tmp_path / "logs")})
    [drift] = report.drift
    assert (drift.column, drift.role, drift.problem) == ("label", "label_col", True)
    assert (
        "absent from 1 of 2 files (read as NULL)" in drift.detail and "feb.parquet" in drift.detail
    )
    assert not report.clean


def test_an_incompatible_type_change_names_the_files(con, tmp_path):
    write(tmp_path / "logs" / "jan.parquet", [good(i) for i in range(4)])
    write(
        tmp_path / "logs" / "feb.parquet",
        [good(i, label=str(i)) for i in range(4)],
        SCHEMA.set(4, pa.field("label", pa.string())),
    )
    with pytest.raises(DbmetricsError) as err:
        check_log(con, {"logs": str(tmp_path / "logs")})
    message = str(err.value)
    assert message.startswith("label_col: column `label` is VARCHAR") and "\n" not in message
    assert "types differ: BIGINT in 1 file" in message and "feb.parquet" in message


def test_bad_parameters_are_refused_like_the_saved_queries_do(con, dirty):
    for params, expected in [
        ({"logs": dirty, "grain": "year"}, "parameter `grain` must be one of day, week, month"),
        ({"logs": dirty, "bins": "3"}, "query `check` has no parameter bins"),
        ({"logs": dirty, "tolerance": "2"}, "parameter `tolerance` must lie in 0..1"),
        ({"logs": dirty, "target_col": "label"}, "target_col: column `label` is BIGINT"),
        (
            {"logs": dirty, "id_col": "nope"},
            "id_col: column `nope` not found in logs; columns are: id, ts",
        ),
        ({}, "query `check` needs parameter `logs`"),
    ]:
        with pytest.raises(DbmetricsError, match=expected.replace("(", r"\(")):
            check_log(con, params)


# --- the command line -----------------------------------------------------------------------


@pytest.fixture
def invoke(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    for name in ("DBMETRICS_PROJECT", "DBMETRICS_DATABASE", "DBMETRICS_QUERY_PATH"):
        monkeypatch.delenv(name, raising=False)
    return lambda *args: CliRunner().invoke(cli, ["check", *args])


def test_cli_exit_4_and_a_readable_report_when_problems_are_found(invoke, dirty):
    result = invoke("--set", f"logs={dirty}", "--set", "id_col=id")
    assert result.exit_code == 4 and result.stderr == ""
    out = result.stdout
    assert out.startswith(f"dbmetrics check: {dirty}: 11 PROBLEMS FOUND\n")
    for section in (
        "Columns:",
        "Rows per week and version:",
        "Classes per version",
        "Checks:",
        "Files with timestamp problems:",
    ):
        assert section in out
    assert re.search(r"\nscores +missing_scores +2  PROBLEM  scores NULL or an empty list\n", out)


def test_cli_exit_0_for_a_clean_log_and_json_for_machines(invoke, clean):
    result = invoke("--set", f"logs={clean}", "--format", "json")
    assert result.exit_code == 0, result.output
    data = json.loads(result.stdout)
    assert data["clean"] is True and data["problems"] == 0
    assert {i["reason"] for i in data["issues"]} >= {"missing_scores", "out_of_order"}
    assert data["periods"][0]["period"] == "2025-12-29"
    assert len(data["files"]) == 3


def test_cli_writes_the_report_atomically_and_keeps_the_exit_status(invoke, dirty, tmp_path):
    target = tmp_path / "health.json"
    result = invoke("--set", f"logs={dirty}", "-o", str(target))
    assert result.exit_code == 4
    assert result.stderr == f"wrote the report to {target}: 9 problems found\n"
    assert json.loads(target.read_text())["clean"] is False
    assert sorted(p.name for p in tmp_path.iterdir()) == ["health.json", "logs"]


def test_cli_takes_the_column_roles_from_the_project_file(invoke, dirty, tmp_path):
    (tmp_path / "dbmetrics.toml").write_text(
        f'[params]\nlogs = "{dirty}"\nbins = 20\n[queries.check]\nid_col = "id"\n'
    )
    data = json.loads(invoke("-f", "json").stdout)
    assert {i["reason"]: i["count"] for i in data["issues"]}["duplicate_ids"] == 3


def test_cli_errors_are_one_line(invoke, tmp_path):
    (tmp_path / "empty").mkdir()
    for args, expected in [
        (("--set", "logs=empty"), "Error: logs: `empty` is neither a table or view nor a readable"),
        (
            ("--set", "logs=x", "-o", "report.csv"),
            "Error: --output: check writes a table (.txt) or json",
        ),
    ]:
        result = invoke(*args)
        assert result.exit_code == 1 and result.stderr.startswith(expected)
        assert result.stderr.count("\n") == 1


@pytest.mark.parametrize("name", ["version", "period", "n", "score_issue", "k"])
def test_a_version_column_with_the_name_of_an_internal_column(con, name):
    """Either counted right under its own name, or refused (never silently miscounted)."""
    con.register(
        "odd",
        pa.table(
            {"ts": [START] * 2, name: ["a", None], "logits": [[1.0, 2.0], None], "label": [0, 1]}
        ),
    )
    try:
        report = check_log(con, {"logs": "odd", "version_col": name})
    except DbmetricsError as exc:
        assert "clashes with a computed column name" in str(exc)
        return
    assert counts(report) == {"missing_scores": 1, "null_versions": 1}
