"""Time zones and label conventions: days cut in the `timezone` parameter whatever the
machine's time zone; whole-number DOUBLE labels, NaN and an `unlabelled_value` sentinel as
not labelled; `classes` with the wrong count is an error."""

import datetime as dt
import json
import os
import subprocess
import sys
import warnings
import zoneinfo
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics import DbmetricsError
from dbmetrics.check import check_log
from dbmetrics.partials import update
from dbmetrics.queries import run_query

ROOT = Path(__file__).resolve().parent.parent
UTC = dt.timezone.utc


@pytest.fixture(scope="module")
def zoned_log(tmp_path_factory):
    """200 predictions every 37 minutes from 2026-03-07 (across the US switch to summer
    time on 2026-03-08) with a TIMESTAMPTZ time column."""
    start = dt.datetime(2026, 3, 7, 0, 13, tzinfo=UTC)
    times = [start + dt.timedelta(minutes=37 * i) for i in range(200)]
    rng = np.random.default_rng(3)
    path = tmp_path_factory.mktemp("tz") / "zoned.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(times, pa.timestamp("us", tz="UTC")),
                "model_version": ["v1"] * 200,
                "logits": rng.normal(size=(200, 3)).tolist(),
                "label": rng.integers(0, 3, 200),
            }
        ),
        path,
    )
    return str(path), times


def expected_days(times, zone):
    """rows per local day, by the Python standard library's zoneinfo."""
    days = {}
    for t in times:
        d = t.astimezone(zoneinfo.ZoneInfo(zone)).date().isoformat()
        days[d] = days.get(d, 0) + 1
    return sorted(days.items())


SCRIPT = """
import json, sys
import dbmetrics
from dbmetrics.check import check_log
from dbmetrics.queries import run_query
con = dbmetrics.connect()
con.execute("SET enable_progress_bar = false")
path, zone = sys.argv[1], sys.argv[2]
params = {"logs": path, "grain": "day", "timezone": zone}
days = run_query(con, "rollup", params).select(["period", "rows"]).to_pylist()
checked = check_log(con, params).periods
print(json.dumps({"rollup": [[r["period"].isoformat(), r["rows"]] for r in days],
                  "check": [[p.isoformat(), n] for p, _, n in checked]}))
"""


@pytest.mark.slow
@pytest.mark.parametrize("zone", ["UTC", "America/Los_Angeles"])
def test_day_boundaries_do_not_depend_on_the_machine_time_zone(zoned_log, zone):
    """The same answer under TZ=UTC and TZ=America/Los_Angeles, and equal to zoneinfo's."""
    path, times = zoned_log
    answers = []
    for machine in ("UTC", "America/Los_Angeles"):
        env = {**os.environ, "TZ": machine, "PYTHONPATH": str(ROOT)}
        out = subprocess.run(
            [sys.executable, "-c", SCRIPT, path, zone],
            env=env,
            capture_output=True,
            text=True,
            check=True,
        )
        answers.append(json.loads(out.stdout.strip().splitlines()[-1]))
    assert answers[0] == answers[1]
    want = [list(pair) for pair in expected_days(times, zone)]
    assert answers[0]["rollup"] == answers[0]["check"] == want


def test_the_partials_store_cuts_days_in_the_time_zone(con, zoned_log, tmp_path):
    """A store built in a time zone answers as a scan of the logs in that zone."""
    path, times = zoned_log
    params = {"logs": path, "timezone": "America/Los_Angeles"}
    con.execute("SET TimeZone = 'Asia/Tokyo'")  # the session's zone must not matter
    update(con, params, tmp_path / "store")
    stored = run_query(
        con, "rollup", {**params, "grain": "day", "partials": str(tmp_path / "store")}
    )
    got = [(r["period"].isoformat(), r["rows"]) for r in stored.to_pylist()]
    assert got == expected_days(times, "America/Los_Angeles")


def test_naive_timestamps_are_read_as_written(con, tmp_path):
    path = tmp_path / "naive.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": [dt.datetime(2026, 1, 5, 23, 30), dt.datetime(2026, 1, 6, 0, 30)],
                "model_version": ["v1", "v1"],
                "logits": [[2.0, 0.0], [0.0, 2.0]],
                "label": [0, 1],
            }
        ),
        path,
    )
    for zone in ("UTC", "Pacific/Kiritimati"):
        out = run_query(con, "rollup", {"logs": str(path), "grain": "day", "timezone": zone})
        assert out.column("rows").to_pylist() == [1, 1]


def test_an_unknown_time_zone_names_the_parameter_and_close_names(con, zoned_log):
    with pytest.raises(DbmetricsError, match=r"timezone: `Europe/Berln` is not.*Europe/Berlin"):
        run_query(con, "rollup", {"logs": zoned_log[0], "timezone": "Europe/Berln"})


def labelled_log(path, labels, label_type):
    k = 3
    rows = len(labels)
    pq.write_table(
        pa.table(
            {
                "ts": [dt.datetime(2026, 1, 5, 9)] * rows,
                "model_version": ["v1"] * rows,
                "logits": [[2.0, 0.5, -1.0]] * rows,
                "label": pa.array(labels, label_type),
            }
        ),
        path,
    )
    assert k == 3
    return str(path)


def rollup_counts(con, path, **params):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        (row,) = run_query(con, "rollup", {"logs": path, **params}).to_pylist()
    return {k: row[k] for k in ("rows", "labelled_rows", "evaluated_rows", "bad_labels")} | {
        "cross_entropy": row["cross_entropy"]
    }


def test_whole_number_double_labels_are_class_indices_and_nan_is_unlabelled(con, tmp_path):
    """An integer column with NULLs after a pandas round trip: float64 with NaN."""
    doubles = labelled_log(tmp_path / "d.parquet", [0.0, 1.0, float("nan"), 2.0, 1.5], pa.float64())
    ints = labelled_log(tmp_path / "i.parquet", [0, 1, None, 2, 7], pa.int64())
    got, same = rollup_counts(con, doubles), rollup_counts(con, ints)
    assert got == same
    assert (got["labelled_rows"], got["evaluated_rows"], got["bad_labels"]) == (4, 3, 1)
    report = check_log(con, {"logs": doubles})
    issues = {i.reason: i.count for i in report.issues if i.count}
    assert issues == {"unlabelled": 1, "label_out_of_range": 1}


def test_a_sentinel_label_counts_as_unlabelled(con, tmp_path):
    path = labelled_log(tmp_path / "s.parquet", [0, -1, -1, 2, 1], pa.int64())
    plain = rollup_counts(con, path)
    assert (plain["labelled_rows"], plain["bad_labels"]) == (5, 2)
    marked = rollup_counts(con, path, unlabelled_value="-1")
    assert (marked["labelled_rows"], marked["evaluated_rows"], marked["bad_labels"]) == (3, 3, 0)
    report = check_log(con, {"logs": path, "unlabelled_value": "-1"})
    assert {i.reason: i.count for i in report.issues if i.count} == {"unlabelled": 2}
    assert report.clean
    with pytest.raises(DbmetricsError, match="unlabelled_value: `none` is not a number"):
        run_query(con, "rollup", {"logs": path, "unlabelled_value": "none"})


def test_a_sentinel_among_class_names(con, tmp_path):
    path = labelled_log(tmp_path / "n.parquet", ["a", "?", "c", "b", "x"], pa.string())
    got = rollup_counts(con, path, classes="a,b,c", unlabelled_value="?")
    assert (got["labelled_rows"], got["evaluated_rows"], got["bad_labels"]) == (4, 3, 1)


def test_classes_with_another_count_than_k_is_an_error_naming_both(con, tmp_path):
    path = labelled_log(tmp_path / "c.parquet", ["a", "b", "c"], pa.string())
    with pytest.raises(DbmetricsError, match=r"classes: 2 names given, but .* have K = 3"):
        run_query(con, "rollup", {"logs": path, "classes": "a,b"})
    report = check_log(con, {"logs": path, "classes": "a,b,c,d"})
    (issue,) = [i for i in report.issues if i.reason == "classes_count_differs"]
    assert (issue.count, issue.problem) == (3, True) and "v1: K = 3" in issue.detail
    assert dbmetrics.connect  # the module's own connection is not needed
