"""drift: a prediction drift planted in one segment from a given week is flagged there only."""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.special import softmax

import dbmetrics
from dbmetrics.queries import run_query

START = dt.date(2026, 1, 5)  # a Monday
DRIFT_WEEK = 6


@pytest.fixture(scope="module")
def con():
    return dbmetrics.connect()


def write_logs(
    path, seed=31, per_cell=400, weeks=10, k=4, shift=2.0, drift_segment="b", versions=("v1", "v2")
):
    """Labels follow the undrifted model (the seed is fixed: at the default z = 4 about 6 in
    100,000 clean cells pass the cross-entropy test by chance); from DRIFT_WEEK the drifted segment's model
    over-predicts class 0 (its logit + shift)."""
    rng = np.random.default_rng(seed)
    segments = ("a", "b", "c")
    n = per_cell * weeks * len(segments) * len(versions)
    week = rng.integers(0, weeks, n)
    segment = rng.choice(segments, n)
    z = rng.normal(size=(n, k)) * 2.0
    y = (rng.random(n)[:, None] > np.cumsum(softmax(z, axis=1), axis=1)).sum(axis=1)
    z[(segment == drift_segment) & (week >= DRIFT_WEEK), 0] += shift
    days = week * 7 + rng.integers(0, 7, n)
    pq.write_table(
        pa.table(
            {
                "ts": np.datetime64(START) + days.astype("timedelta64[D]"),
                "model_version": rng.choice(versions, n),
                "region": segment,
                "logits": pa.array(list(z), pa.list_(pa.float64())),
                "label": y,
            }
        ),
        path,
    )
    return str(path)


def flagged_cells(table):
    return {(r["period"], r["region"]) for r in table.to_pylist() if r["flagged"]}


def planted(weeks=10):
    return {(START + dt.timedelta(weeks=w), "b") for w in range(DRIFT_WEEK, weeks)}


def test_planted_drift_is_flagged_there_and_nowhere_else(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet")
    out = run_query(con, "drift", {"logs": path, "segment_cols": "region"})  # all defaults
    rows = out.to_pylist()
    assert len(rows) == 10 * 3 * 2
    assert {(r["period"], r["region"], r["model_version"]) for r in rows if r["flagged"]} == {
        (p, s, v) for p, s in planted() for v in ("v1", "v2")
    }
    assert all(r["flag_reasons"] is None for r in rows if not r["flagged"])
    assert all("prediction_js" in r["flag_reasons"] for r in rows if r["flagged"])
    # the default reference is the first 4 weeks, never flagged, same version
    assert {r["period"] for r in rows if r["in_reference"]} == {
        START + dt.timedelta(weeks=w) for w in range(4)
    }
    assert {r["reference"] for r in rows} == {"same version"}


def test_drift_in_probabilities_with_explicit_window(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", seed=12)
    con.sql(
        f"CREATE OR REPLACE VIEW prob_logs AS SELECT * REPLACE (softmax(logits) AS logits) "
        f"FROM read_parquet('{path}')"
    )
    out = run_query(
        con,
        "drift",
        {
            "logs": "prob_logs",
            "scores_kind": "probs",
            "segment_cols": "region",
            "ref_start": "2026-01-12",
            "ref_end": "2026-02-01",
        },
    )
    assert flagged_cells(out) == planted()
    assert {r["period"] for r in out.to_pylist() if r["in_reference"]} == {
        dt.date(2026, 1, 12),
        dt.date(2026, 1, 19),
        dt.date(2026, 1, 26),
    }


def test_small_cells_are_never_flagged(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", per_cell=40, shift=4.0)
    out = run_query(con, "drift", {"logs": path, "segment_cols": "region"})
    assert flagged_cells(out) == set()
    # the same drift with the guard lowered: the planted cells come out
    assert planted() <= flagged_cells(
        run_query(con, "drift", {"logs": path, "segment_cols": "region", "min_rows": "20"})
    )


def test_new_version_is_compared_with_all_versions_pooled(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", seed=13, shift=0.0)
    con.sql(
        f"CREATE OR REPLACE VIEW rollout AS SELECT * REPLACE (CASE WHEN ts >= DATE "
        f"'2026-02-16' THEN 'v3' ELSE model_version END AS model_version) "
        f"FROM read_parquet('{path}')"
    )
    rows = run_query(con, "drift", {"logs": "rollout", "segment_cols": "region"}).to_pylist()
    assert {r["reference"] for r in rows if r["model_version"] == "v3"} == {"all versions"}
    assert not any(r["flagged"] for r in rows)


def test_no_segments_compares_whole_log(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", seed=14, shift=3.0, drift_segment="nowhere")
    rows = run_query(con, "drift", {"logs": path, "version_col": "region"}).to_pylist()
    assert len(rows) == 30 and not any(r["flagged"] for r in rows)
    assert all(r["prediction_js"] < 0.01 and r["label_js"] < 0.01 for r in rows)
