"""The binary view: base rate, mean probability, Brier, ROC AUC and average precision.

Specification: on load_breast_cancer (shipped with scikit-learn; a standardised logistic
regression, 30% stratified test split, its decision function as the log-odds of class 1),
logged as binary_logit, binary_prob and two-class logits, the `binary` query equals
sklearn.metrics.brier_score_loss, and roc_auc_score / average_precision_score within the
binning bound it reports beside each value; class_calibration's class 1 equals
sklearn.calibration.calibration_curve(y, p1). The bound holds and is reached in a log whose
scores are coarse enough to share bins, and a log with more than two classes keeps no
histogram.
"""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import special
from sklearn.calibration import calibration_curve
from sklearn.datasets import load_breast_cancer
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import average_precision_score, brier_score_loss, roc_auc_score
from sklearn.model_selection import train_test_split
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from dbmetrics.queries import run_query


@pytest.fixture(scope="module")
def cancer():
    X, y = load_breast_cancer(return_X_y=True)
    Xtr, Xte, ytr, yte = train_test_split(X, y, test_size=0.3, random_state=0, stratify=y)
    clf = make_pipeline(StandardScaler(), LogisticRegression(max_iter=1000, random_state=0))
    return clf.fit(Xtr, ytr).decision_function(Xte), np.asarray(yte)


def write_log(path, scores, labels, score_type):
    n = len(labels)
    pq.write_table(
        pa.table(
            {
                "ts": [dt.date(2026, 3, 2)] * n,
                "model_version": ["v1"] * n,
                "score": pa.array(list(scores), score_type),
                "label": pa.array(labels, pa.int64()),
            }
        ),
        path,
    )
    return str(path)


@pytest.fixture(scope="module", params=["binary_logit", "binary_prob", "logits"])
def cancer_log(request, cancer, tmp_path_factory):
    """The same model logged three ways; p1 as each route computes it."""
    s, y = cancer
    kind = request.param
    path = tmp_path_factory.mktemp(kind) / "log.parquet"
    if kind == "binary_logit":
        p1 = special.expit(s)
        log = write_log(path, s, y, pa.float64())
    elif kind == "binary_prob":
        p1 = special.expit(s)
        log = write_log(path, p1, y, pa.float64())
    else:
        z = np.stack([np.zeros_like(s), s], axis=1)
        p1 = special.softmax(z, axis=1)[:, 1]
        log = write_log(path, z, y, pa.list_(pa.float64()))
    return {"logs": log, "scores_col": "score", "scores_kind": kind}, p1, s, y


def test_brier_base_rate_and_mean_probability_equal_sklearn(con, cancer_log):
    params, p1, _, y = cancer_log
    (row,) = run_query(con, "binary", params).to_pylist()
    assert row["evaluated_rows"] == len(y) and row["positives"] == y.sum()
    assert row["brier"] == pytest.approx(brier_score_loss(y, p1), rel=1e-12)  # sklearn.metrics
    assert row["base_rate"] == pytest.approx(y.mean(), rel=1e-15)
    assert row["mean_probability"] == pytest.approx(p1.mean(), rel=1e-12)


def test_roc_auc_and_average_precision_equal_sklearn_within_the_bound(con, cancer_log):
    params, p1, s, y = cancer_log
    (row,) = run_query(con, "binary", params).to_pylist()
    auc = roc_auc_score(y, s)  # sklearn.metrics.roc_auc_score
    ap = average_precision_score(y, s)  # sklearn.metrics.average_precision_score
    assert abs(row["roc_auc"] - auc) <= row["roc_auc_bound"] + 1e-15
    assert abs(row["average_precision"] - ap) <= row["average_precision_bound"] + 1e-15
    # 4096 bins on the log-odds separate this model's scores well: the bounds are small
    assert row["roc_auc_bound"] < 1e-3 and row["average_precision_bound"] < 1e-2


def test_positive_class_reliability_equals_sklearn_calibration_curve(con, cancer_log):
    params, p1, _, y = cancer_log
    rows = run_query(
        con, "class_calibration", {**params, "bins": "10", "only_class": "1"}
    ).to_pylist()
    prob_true, prob_pred = calibration_curve(y, p1, n_bins=10)  # sklearn.calibration
    np.testing.assert_allclose([r["label_frequency"] for r in rows], prob_true, rtol=1e-12)
    np.testing.assert_allclose([r["mean_probability"] for r in rows], prob_pred, rtol=1e-12)


def test_the_bound_covers_ties_inside_a_bin_and_is_reached(con, tmp_path):
    """Scores 1/1000 apart share bins 1/128 wide: the binned AUC differs from the exact one,
    by no more than the bound; a bin of positives above a bin of negatives costs nothing."""
    rng = np.random.default_rng(7)
    s = np.round(rng.normal(size=3000), 3)
    y = (rng.random(3000) < special.expit(2 * s)).astype(int)
    log = write_log(tmp_path / "log.parquet", s, y, pa.float64())
    (row,) = run_query(
        con, "binary", {"logs": log, "scores_col": "score", "scores_kind": "binary_logit"}
    ).to_pylist()
    auc, ap = roc_auc_score(y, s), average_precision_score(y, s)
    assert 0 < abs(row["roc_auc"] - auc) <= row["roc_auc_bound"]
    assert 0 < abs(row["average_precision"] - ap) <= row["average_precision_bound"]
    separated = write_log(
        tmp_path / "sep.parquet", [-3.0, -3.0, 3.0, 3.0], [0, 0, 1, 1], pa.float64()
    )
    (clean,) = run_query(
        con, "binary", {"logs": separated, "scores_col": "score", "scores_kind": "binary_logit"}
    ).to_pylist()
    assert clean["roc_auc"] == 1.0 and clean["roc_auc_bound"] == 0.0
    assert clean["average_precision"] == 1.0 and clean["average_precision_bound"] == 0.0


def test_one_class_only_gives_null_auc(con, tmp_path):
    log = write_log(tmp_path / "log.parquet", [0.5, 1.5], [1, 1], pa.float64())
    (row,) = run_query(
        con, "binary", {"logs": log, "scores_col": "score", "scores_kind": "binary_logit"}
    ).to_pylist()
    assert row["roc_auc"] is None and row["average_precision"] == 1.0


def test_a_log_with_more_than_two_classes_keeps_no_histogram(con, tmp_path):
    z = np.random.default_rng(1).normal(size=(50, 3))
    log = write_log(tmp_path / "log.parquet", z, [0, 1] * 25, pa.list_(pa.float64()))
    assert run_query(con, "binary", {"logs": log, "scores_col": "score"}).num_rows == 0


def test_the_rollup_reports_the_binary_view_and_brier_as_sklearn(con, cancer_log):
    params, p1, s, y = cancer_log
    (row,) = run_query(con, "rollup", params).to_pylist()
    (binary,) = run_query(con, "binary", params).to_pylist()
    assert row["brier"] == pytest.approx(brier_score_loss(y, p1), rel=1e-12)  # sklearn.metrics
    # Brier (1950) summed over both classes: exactly twice the positive-class form
    assert row["brier_multiclass"] == pytest.approx(2 * brier_score_loss(y, p1), rel=1e-9)
    for name in ("base_rate", "roc_auc", "roc_auc_bound", "average_precision"):
        assert row[name] == binary[name], name
    assert row["mean_positive_probability"] == binary["mean_probability"]
    assert abs(row["roc_auc"] - roc_auc_score(y, s)) <= row["roc_auc_bound"] + 1e-15


def test_a_multiclass_rollup_keeps_brier_as_the_sum_and_no_binary_columns(con, tmp_path):
    z = np.random.default_rng(1).normal(size=(60, 3))
    y = np.arange(60) % 3
    log = write_log(tmp_path / "log.parquet", z, y, pa.list_(pa.float64()))
    (row,) = run_query(con, "rollup", {"logs": log, "scores_col": "score"}).to_pylist()
    p = special.softmax(z, axis=1)
    # sklearn.metrics.brier_score_loss with three classes: the multi-class sum (Brier 1950)
    expected = brier_score_loss(y, p, labels=[0, 1, 2])
    assert row["brier"] == row["brier_multiclass"] == pytest.approx(expected, rel=1e-12)
    assert row["roc_auc"] is None and row["base_rate"] is None
