"""Paths: hive partitioning only for a clear key=value layout and never over a file column;
glob characters in a path that exists are literal."""

import datetime as dt
import warnings

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from dbmetrics import DbmetricsWarning
from dbmetrics.check import check_log
from dbmetrics.queries import run_query
from dbmetrics.queries.schema import open_source


def part(path, labels, version="v1", **extra):
    path.parent.mkdir(parents=True, exist_ok=True)
    n = len(labels)
    pq.write_table(
        pa.table(
            {
                "ts": [dt.datetime(2026, 1, 5, 9)] * n,
                "model_version": [version] * n,
                "logits": [[2.0, 0.0, -1.0]] * n,
                "label": labels,
                **extra,
            }
        ),
        path,
    )


def rollup(con, logs, **params):
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        rows = run_query(con, "rollup", {"logs": str(logs), **params}).to_pylist()
    return rows, [str(w.message) for w in caught if w.category is DbmetricsWarning]


def test_a_partition_key_never_replaces_a_file_column(con, tmp_path):
    """label=2 folders above files whose label column says 0 and 1: the files win."""
    part(tmp_path / "logs" / "label=2" / "a.parquet", [0, 1, 0])
    (row,), notes = rollup(con, tmp_path / "logs")
    assert (row["evaluated_rows"], row["accuracy"]) == (3, pytest.approx(2 / 3))
    assert notes == [
        "logs: label=... folders in the path name a partition key that is also a column of "
        "the files: the file column `label` is read, the folder value ignored (rename the "
        "folders to use it)"
    ]
    report = check_log(con, {"logs": str(tmp_path / "logs")})
    (drift,) = [d for d in report.drift if d.column == "label"]
    assert drift.problem and "partition key that is also a column" in drift.detail
    assert not report.clean


def test_a_clear_hive_layout_adds_its_keys(con, tmp_path):
    for month, labels in (("2026-01", [0, 1]), ("2026-02", [2])):
        part(tmp_path / "logs" / f"month={month}" / "part-0.parquet", labels)
    source = open_source(con, "logs", str(tmp_path / "logs"))
    assert "month" in source.columns and source.shadowed == ()
    rows, notes = rollup(con, tmp_path / "logs", segment_cols="month")
    assert [(r["month"], r["rows"]) for r in rows] == [("2026-01", 2), ("2026-02", 1)]
    assert notes == []


def test_a_mixed_layout_is_not_hive(con, tmp_path):
    """Some files in key=value folders, some not: no partition columns, all rows read."""
    part(tmp_path / "logs" / "region=n" / "a.parquet", [0])
    part(tmp_path / "logs" / "b.parquet", [1, 2])
    source = open_source(con, "logs", str(tmp_path / "logs"))
    assert "region" not in source.columns
    (row,), _ = rollup(con, tmp_path / "logs")
    assert row["rows"] == 3


def test_a_glob_character_in_an_existing_path_is_literal(con, tmp_path):
    """A store-like folder `g*` beside `gA`: `g*` reads only itself; brackets read too."""
    part(tmp_path / "g*" / "a.parquet", [0])
    part(tmp_path / "gA" / "a.parquet", [1, 2])
    part(tmp_path / "day[1]" / "a.parquet", [0, 1, 2, 0])
    assert rollup(con, tmp_path / "g*")[0][0]["rows"] == 1
    assert rollup(con, tmp_path / "day[1]")[0][0]["rows"] == 4
    assert rollup(con, tmp_path / "day[1]" / "a.parquet")[0][0]["rows"] == 4
    assert check_log(con, {"logs": str(tmp_path / "day[1]")}).periods[0][2] == 4
    # a pattern that names no existing path is still a glob
    assert rollup(con, str(tmp_path / "g?" / "*.parquet"))[0][0]["rows"] == 3
