"""Empty or meaningless answers each print one line on stderr (a DbmetricsWarning in Python)
saying what happened and what to change; the check reports the log-wide ones."""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

import dbmetrics
from dbmetrics.check import check_log
from dbmetrics.cli.main import cli

START = dt.datetime(2026, 1, 5, 8)  # a Monday


def write_log(path, weeks, per_week, scores=None, labels=True):
    rng = np.random.default_rng(5)
    n = weeks * per_week
    table = {
        "prediction_id": np.arange(n),
        "ts": [
            START + dt.timedelta(days=7 * (i // per_week), minutes=i % per_week) for i in range(n)
        ],
        "model_version": ["v1"] * n,
        "logits": scores if scores is not None else rng.normal(0, 2, (n, 3)).tolist(),
    }
    if labels:
        table["label"] = rng.integers(0, 3, n)
    pq.write_table(pa.table(table), path)
    return str(path)


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    return tmp_path_factory.mktemp("empty")


def warnings_of(*args):
    result = CliRunner().invoke(cli, list(args))
    assert result.exit_code == 0, result.output
    return [line for line in result.stderr.splitlines() if line.startswith("dbmetrics: warning:")]


def run(query, logs, *settings):
    sets = [x for s in settings for x in ("--set", s)]
    return warnings_of("run", query, "--set", f"logs={logs}", *sets)


def test_a_reference_window_without_rows(folder):
    logs = write_log(folder / "long.parquet", 8, 300)
    (line,) = run("drift", logs, "ref_start=2025-01-06", "ref_end=2025-02-01")
    assert "the reference window (ref_start=2025-01-06, ref_end=2025-02-01) holds no" in line
    assert "set ref_start/ref_end to days inside the log (2026-01-05..2026-02-23)" in line


def test_every_period_inside_the_reference(folder):
    logs = write_log(folder / "short.parquet", 3, 300)
    (line,) = run("drift", logs)
    assert "every period (2026-01-05..2026-01-19) lies inside the reference window" in line
    assert "end the window earlier (ref_end)" in line


def test_every_cell_below_min_rows(folder):
    logs = write_log(folder / "small.parquet", 8, 20)
    (line,) = run("drift", logs)
    assert "fewer than min_rows=200 scored rows (the largest has 20)" in line
    assert "lower min_rows" in line
    assert run("drift", logs, "min_rows=10") == []


def test_a_label_table_whose_ids_match_no_prediction(folder, con):
    logs = write_log(folder / "unlabelled.parquet", 2, 50, labels=False)
    labels = folder / "labels.parquet"
    pq.write_table(pa.table({"prediction_id": np.arange(1000, 1100), "label": [1] * 100}), labels)
    settings = (f"labels={labels}", "id_col=prediction_id")
    (line,) = run("rollup", logs, *settings)
    assert f"labels: no id in `{labels}` matches an id_col `prediction_id`" in line
    assert "label coverage 0" in line
    report = check_log(con, {"logs": logs, "labels": str(labels), "id_col": "prediction_id"})
    (issue,) = [i for i in report.issues if i.reason == "labels_match_no_prediction"]
    assert (issue.count, issue.problem, report.clean) == (100, True, False)


def test_every_score_invalid(folder, con):
    logs = write_log(folder / "nan.parquet", 2, 50, scores=[[float("nan")] * 3] * 100)
    (line,) = run("rollup", logs)
    assert line.endswith(
        "none of the 100 rows has usable scores (all missing or invalid_scores): check "
        "scores_col and scores_kind, and `dbmetrics check` for the reasons"
    )
    (drift_line,) = run("drift", logs)
    assert "none of the 100 rows has usable scores" in drift_line
    report = check_log(con, {"logs": logs})
    assert [i.count for i in report.issues if i.reason == "no_usable_scores"] == [100]


def test_calibration_on_a_log_without_labels(folder):
    logs = write_log(folder / "nolabels.parquet", 2, 50, labels=False)
    (line,) = run("calibration", logs, "label_col=")
    assert "calibration: label_col is empty, so there is nothing to evaluate" in line
    (line,) = run("recalibration", logs, "label_col=")
    assert "recalibration: label_col is empty" in line


def test_a_sound_answer_has_no_warning(folder):
    logs = write_log(folder / "sound.parquet", 8, 300)
    for query in ("rollup", "drift", "calibration", "recalibration"):
        assert run(query, logs) == [], query


def test_the_api_issues_the_same_lines_as_warnings(folder):
    logs = write_log(folder / "api.parquet", 3, 300)
    from dbmetrics.queries import run_query

    with pytest.warns(dbmetrics.DbmetricsWarning, match="lies inside the reference window"):
        run_query(dbmetrics.connect(), "drift", {"logs": logs})
