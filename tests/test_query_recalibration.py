"""recalibration: the temperature that best fits each cell, and what it wins back.

References: temperature scaling (Guo et al. 2017) divides logits by one number; the grid
optimum is checked against numpy (every grid point) and against scipy.optimize's continuous
minimum of the same mean cross-entropy.
"""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.optimize import minimize_scalar
from scipy.special import log_softmax

from dbmetrics.errors import DbmetricsError
from dbmetrics.queries import run_query

START = dt.datetime(2026, 1, 5)


def over_confident_log(path, n=4000, k=5, factor=2.0, seed=3):
    """Labels drawn from softmax(z); the log holds factor * z (an over-confident model)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=(n, k)) * 1.5
    p = np.exp(log_softmax(z, axis=1))
    y = (rng.random(n)[:, None] > np.cumsum(p, axis=1)).sum(axis=1)
    logged = factor * z
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(
                    [START + dt.timedelta(hours=int(h)) for h in rng.integers(0, 24 * 7, n)],
                    pa.timestamp("us"),
                ),
                "model_version": ["v1"] * n,
                "logits": pa.array(list(logged), pa.list_(pa.float64())),
                "label": pa.array(y, pa.int64()),
            }
        ),
        path,
    )
    return logged, y


def mean_ce(z, y, t):
    return float(-log_softmax(z / t, axis=1)[np.arange(len(y)), y].mean())


def test_the_planted_temperature_is_found_and_the_gain_is_exact(con, tmp_path):
    z, y = over_confident_log(tmp_path / "log.parquet")
    row = run_query(
        con, "recalibration", {"logs": str(tmp_path / "log.parquet"), "label_col": "label"}
    ).to_pylist()[0]
    grid = 0.25 * 16 ** (np.arange(41) / 40)
    losses = [mean_ce(z, y, t) for t in grid]  # numpy, every grid point
    best = grid[int(np.argmin(losses))]
    assert row["evaluated_rows"] == len(y)
    assert row["cross_entropy"] == pytest.approx(mean_ce(z, y, 1.0), rel=1e-12)
    assert row["best_temperature"] == pytest.approx(best, rel=1e-12)
    assert row["recalibrated_cross_entropy"] == pytest.approx(min(losses), rel=1e-12)
    assert row["recalibration_gain"] == pytest.approx(mean_ce(z, y, 1.0) - min(losses), rel=1e-9)
    continuous = minimize_scalar(lambda t: mean_ce(z, y, t), bounds=(0.25, 4), method="bounded")
    assert abs(row["best_temperature"] - continuous.x) < 0.08 * continuous.x  # grid step 7%
    assert 0 <= row["recalibrated_cross_entropy"] - continuous.fun < 1e-3
    assert row["best_temperature"] == pytest.approx(2.0, abs=0.2) and not row["at_grid_edge"]


def test_a_calibrated_model_gains_almost_nothing(con, tmp_path):
    over_confident_log(tmp_path / "log.parquet", factor=1.0)
    row = run_query(con, "recalibration", {"logs": str(tmp_path / "log.parquet")}).to_pylist()[0]
    assert 0.9 < row["best_temperature"] < 1.1 and row["recalibration_gain"] < 2e-3


def test_an_optimum_outside_the_grid_is_reported(con, tmp_path):
    over_confident_log(tmp_path / "log.parquet", factor=8.0)
    row = run_query(
        con, "recalibration", {"logs": str(tmp_path / "log.parquet"), "max_temperature": "3"}
    ).to_pylist()[0]
    assert row["best_temperature"] == pytest.approx(3.0) and row["at_grid_edge"]


def test_it_needs_rows_not_a_partials_store(con, tmp_path):
    with pytest.raises(DbmetricsError, match="no parameter partials"):
        run_query(con, "recalibration", {"partials": str(tmp_path)})


def test_the_sql_function_matches_scipy(con):
    z, t = [2.0, -1.0, 0.5], [1.0, 2.0, 0.5]
    got = con.sql(
        "SELECT temperature_scaled_losses($z, 0, $t, 'logits')", params={"z": z, "t": t}
    ).fetchall()[0][0]
    want = [-log_softmax(np.array(z) / s)[0] for s in t]  # scipy.special.log_softmax
    assert got == pytest.approx(want, rel=1e-12)
