"""labels: label coverage and arrival delay per period, against numpy on a log with known delays."""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from dbmetrics.queries import run_query


@pytest.fixture
def logged(tmp_path):
    """60 predictions over two weeks; 45 labelled 0.5-12 days later (one twice), one early."""
    rng = np.random.default_rng(11)
    n = 60
    start = dt.datetime(2026, 3, 2)
    ts = [start + dt.timedelta(hours=float(h)) for h in rng.uniform(0, 14 * 24, n)]
    delay = rng.uniform(0.5, 12, n)
    delay[3] = -0.25  # a label stamped before its prediction
    labelled = np.arange(n) < 45
    logs = pa.table(
        {
            "prediction_id": [f"p{i}" for i in range(n)],
            "ts": ts,
            "model_version": ["v1" if i % 3 else "v2" for i in range(n)],
            "region": ["a" if i % 2 else "b" for i in range(n)],
            "logits": [[0.0, 1.0]] * n,
        }
    )
    ids = [f"p{i}" for i in range(n) if labelled[i]] + ["p0"]
    times = [ts[i] + dt.timedelta(days=float(delay[i])) for i in range(n) if labelled[i]]
    times.append(times[0] + dt.timedelta(days=30))  # a second, later label row for p0
    labels = pa.table({"prediction_id": ids, "label": [1] * len(ids), "labelled_at": times})
    pq.write_table(logs, tmp_path / "logs.parquet")
    pq.write_table(labels, tmp_path / "labels.parquet")
    params = {
        "logs": str(tmp_path / "logs.parquet"),
        "labels": str(tmp_path / "labels.parquet"),
        "id_col": "prediction_id",
    }
    return params, ts, delay, labelled


def test_coverage_and_delays_match_numpy_per_week_and_version(con, logged):
    params, ts, delay, labelled = logged
    out = run_query(con, "labels", params)
    assert out.column_names[:2] == ["period", "model_version"]
    week = [(t.date() - dt.timedelta(days=t.weekday())) for t in ts]
    version = ["v1" if i % 3 else "v2" for i in range(len(ts))]
    for row in out.to_pylist():
        at = [
            i
            for i in range(len(ts))
            if (week[i], version[i]) == (row["period"], row["model_version"])
        ]
        days = delay[[i for i in at if labelled[i]]]  # p0's earliest label counts, not its second
        assert row["rows"] == len(at) and row["labelled_rows"] == len(days)
        assert row["label_coverage"] == pytest.approx(len(days) / len(at))
        # numpy.percentile's default (linear, Hyndman & Fan 1996 type 7) = DuckDB quantile_cont
        assert row["median_delay_days"] == pytest.approx(np.percentile(days, 50), abs=1e-6)
        assert row["p90_delay_days"] == pytest.approx(np.percentile(days, 90), abs=1e-6)
        assert row["mean_delay_days"] == pytest.approx(days.mean(), abs=1e-6)
        assert row["max_delay_days"] == pytest.approx(days.max(), abs=1e-6)
        assert row["early_labels"] == int((days < 0).sum())
    assert sum(r["early_labels"] for r in out.to_pylist()) == 1
    assert sum(r["rows"] for r in out.to_pylist()) == len(ts)


def test_segments_and_month_grain(con, logged):
    params, ts, _, labelled = logged
    out = run_query(con, "labels", {**params, "segment_cols": "region", "grain": "month"})
    assert out.column_names[:3] == ["period", "model_version", "region"]
    assert {r["period"] for r in out.to_pylist()} == {dt.date(2026, 3, 1)}
    assert sum(r["labelled_rows"] for r in out.to_pylist()) == int(labelled.sum())
