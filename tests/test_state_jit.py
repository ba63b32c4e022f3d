"""The compiled STATE route (numba, extra `jit`) is the numpy engine's computation, fused.

Specification: with numba installed, a query that needs only STATE gets it from
kernels/state_jit.py; every STATE column equals the numpy engine's (DBMETRICS_JIT=0) on logs
full of hard cases, for logits and probabilities, float32 and float64 scores, many batches
and many groups; the sums agree with scipy's log-softmax and entropy on a clean log; and the
kernel's accumulators are exactly STATE's columns.
"""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.special import log_softmax
from scipy.stats import entropy

pytest.importorskip("numba")

from dbmetrics.kernels import state_jit  # noqa: E402
from dbmetrics.queries import jit_route  # noqa: E402
from dbmetrics.queries.engine import partial_states  # noqa: E402
from dbmetrics.queries.roles import column_roles  # noqa: E402
from dbmetrics.queries.schema import open_source  # noqa: E402
from dbmetrics.queries.state_sql import STATE_COLUMNS  # noqa: E402

NAN, INF = float("nan"), float("inf")


def hard_log(path, kind="logits", n=300_000, seed=3, value_type=None):
    """Ragged rows (K = 2..6) and every kind of bad row and label, two segment columns with
    NULL keys, spread over five weeks."""
    rng = np.random.default_rng(seed)
    ks = rng.integers(2, 7, n)
    if kind == "logits":
        scores = [list(rng.normal(size=k) * 3) for k in ks]
    else:
        scores = [list(rng.dirichlet(np.ones(k))) for k in ks]
    labels = [int(rng.integers(0, k)) for k in ks]
    cases = rng.choice(n, 12 * 500, replace=False).reshape(12, 500)
    for case, rows in enumerate(cases):
        for i in rows:
            k = len(scores[i])
            if case == 0:
                scores[i] = None
            elif case == 1:
                scores[i] = []
            elif case == 2:
                scores[i][0] = NAN
            elif case == 3:
                scores[i][-1] = None  # a NULL element
            elif case == 4:
                scores[i][labels[i]] = -INF if kind == "logits" else 0.0  # p(true class) = 0
            elif case == 5:
                scores[i] = [-INF] * k if kind == "logits" else [0.5] * k  # all masked / sum != 1
            elif case == 6:
                scores[i][0] = INF if kind == "logits" else -0.1
            elif case == 7:
                labels[i] = None
            elif case == 8:
                labels[i] = k + int(rng.integers(0, 3))  # out of range
            elif case == 9:
                labels[i] = -1  # what conflicting late labels become
            elif case == 10 and kind == "logits":
                scores[i] = list(rng.choice([-1e4, 1e4, 0.0], k))
            elif case == 11:
                scores[i] = [1.0 / k] * k  # ties: the first maximum is predicted
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(
                    [
                        dt.datetime(2026, 3, 2) + dt.timedelta(minutes=int(m))
                        for m in rng.integers(0, 60 * 24 * 35, n)
                    ],
                    pa.timestamp("us"),
                ),
                "model_version": rng.choice(["v1", "v2", None], n, p=[0.45, 0.45, 0.1]),
                "region": rng.choice(["north", "south", None], n, p=[0.5, 0.4, 0.1]),
                "plan": rng.choice(["free", "pro", "team"], n),
                "scores": pa.array(scores, pa.list_(value_type or pa.float32())),
                "label": pa.array(labels, pa.int64()),
            }
        ),
        path,
    )
    return str(path)


def states(con, path, kind, monkeypatch, jit: bool):
    """STATE of the log by the compiled route (jit=True) or the numpy engine."""
    monkeypatch.setenv(state_jit.DISABLE_VARIABLE, "1" if jit else "0")
    source = open_source(con, "logs", path)
    texts = {
        "time_col": "ts",
        "scores_col": "scores",
        "scores_kind": kind,
        "label_col": "label",
        "version_col": "model_version",
        "segment_cols": "region, plan",
        "labels": None,
        "id_col": None,
        "classes": None,
    }
    roles = column_roles(texts, {"logs": source}, set())
    return partial_states(con, roles, {"bins": 15, "classes": None, **source.bound})["state"]


def test_every_route_returns_the_state_columns_in_order(con, tmp_path, monkeypatch):
    path = hard_log(tmp_path / "log.parquet", n=20_000)
    keys = ["day", "model_version", "region", "plan"]
    for jit in (True, False):
        state = states(con, path, "logits", monkeypatch, jit=jit)
        assert state.column_names == [*keys, *STATE_COLUMNS[1:]]


@pytest.mark.parametrize(
    "kind, value_type",
    [
        ("logits", pa.float32()),
        ("logits", pa.float64()),
        ("probs", pa.float32()),
        ("probs", pa.float64()),
    ],
)
def test_the_compiled_state_equals_the_numpy_engine(
    con, tmp_path, monkeypatch, same_table, kind, value_type
):
    path = hard_log(tmp_path / "log.parquet", kind, value_type=value_type)
    compiled = states(con, path, kind, monkeypatch, jit=True)
    engine = states(con, path, kind, monkeypatch, jit=False)
    same_table(engine, compiled)
    totals = {c: sum(compiled.column(c).to_pylist()) for c in state_jit.COUNTS}
    assert totals["rows"] == 300_000
    for count in ("missing_scores", "invalid_scores", "bad_labels", "infinite_loss_rows"):
        assert totals[count] > 0, count  # every category was exercised


def test_many_key_combinations_are_numbered_by_sorting(con, tmp_path, monkeypatch, same_table):
    monkeypatch.setattr(jit_route, "_DIRECT_GROUPS", 4)
    path = hard_log(tmp_path / "log.parquet", n=40_000)
    compiled = states(con, path, "logits", monkeypatch, jit=True)
    same_table(states(con, path, "logits", monkeypatch, jit=False), compiled)


def test_the_sums_agree_with_scipy_on_a_clean_log(con, tmp_path, monkeypatch):
    # Reference: scipy.special.log_softmax (cross-entropy = -log p_y), scipy.stats.entropy
    # (Shannon entropy in nats) and the multi-class Brier score sum_j (p_j - [j = y])^2
    # (Brier 1950), all on the same rows in float64.
    rng = np.random.default_rng(11)
    n, k = 5000, 4
    z = rng.normal(size=(n, k)) * 2
    y = rng.integers(0, k, n)
    path = tmp_path / "clean.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 3, 2, 12)] * n, pa.timestamp("us")),
                "model_version": ["v1"] * n,
                "region": ["north"] * n,
                "plan": ["pro"] * n,
                "scores": pa.array(list(z), pa.list_(pa.float64())),
                "label": pa.array(y, pa.int64()),
            }
        ),
        path,
    )
    state = states(con, str(path), "logits", monkeypatch, jit=True)
    total = {c: sum(state.column(c).to_pylist()) for c in ("evaluated_rows", *state_jit.SUMS)}
    logp = log_softmax(z, axis=1)
    p = np.exp(logp)
    assert total["evaluated_rows"] == n
    np.testing.assert_allclose(total["sum_loss"], -logp[np.arange(n), y].sum(), rtol=1e-12)
    np.testing.assert_allclose(total["sum_loss_sq"], (logp[np.arange(n), y] ** 2).sum(), rtol=1e-12)
    np.testing.assert_allclose(total["sum_entropy"], entropy(p, axis=1).sum(), rtol=1e-12)
    np.testing.assert_allclose(total["sum_confidence"], p.max(axis=1).sum(), rtol=1e-12)
    brier = ((p - np.eye(k)[y]) ** 2).sum()
    np.testing.assert_allclose(total["sum_brier"], brier, rtol=1e-12)
    brier_sq = (((p - np.eye(k)[y]) ** 2).sum(axis=1) ** 2).sum()
    np.testing.assert_allclose(total["sum_brier_sq"], brier_sq, rtol=1e-12)


def test_numba_absent_or_turned_off_means_the_numpy_engine(monkeypatch):
    monkeypatch.setenv(state_jit.DISABLE_VARIABLE, "0")
    assert not state_jit.available()
    monkeypatch.setenv(state_jit.DISABLE_VARIABLE, "1")
    assert state_jit.available()
