"""A realistic check on data shipped inside scikit-learn (no download at run time).

load_digits (1797 x 64, 10 classes, shipped with scikit-learn), a standardised logistic regression, 30% stratified test split: 540 rows of
10 logits. References: sklearn.metrics log_loss / accuracy_score / brier_score_loss,
and an independent numpy ECE/MCE (Guo et al. 2017, right-closed bins).
Compare with in-test references at rel 1e-9 or tighter, and with the values observed with
scikit-learn 1.9.1 at rel 1e-6 (solver/BLAS changes can move the last digits).
"""

import numpy as np
import pyarrow as pa
import pytest
from scipy import special
from sklearn.datasets import load_breast_cancer, load_digits
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import accuracy_score, brier_score_loss, log_loss
from sklearn.model_selection import train_test_split
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler


def fitted(load):
    X, y = load(return_X_y=True)
    Xtr, Xte, ytr, yte = train_test_split(X, y, test_size=0.3, random_state=0, stratify=y)
    clf = make_pipeline(StandardScaler(), LogisticRegression(max_iter=1000, random_state=0)).fit(
        Xtr, ytr
    )
    return clf.decision_function(Xte), clf.predict_proba(Xte), yte


@pytest.fixture(scope="module")
def digits():
    logits, proba, labels = fitted(load_digits)
    table = pa.table(
        {
            "i": np.arange(len(labels)),
            "logits": pa.array(list(logits), pa.list_(pa.float64())),
            "probs": pa.array(list(proba), pa.list_(pa.float64())),
            "label": labels,
        }
    )
    return logits, proba, labels, table


def numpy_ece_mce(conf, correct, bins):
    """Guo et al. (2017): sum_m |B_m|/n |acc - conf| and max_m, bins (m/M, (m+1)/M], 0 in the first."""
    edges = np.linspace(0, 1, bins + 1)
    ece, mce = 0.0, 0.0
    for m in range(bins):
        in_bin = ((conf > edges[m]) & (conf <= edges[m + 1])) | ((m == 0) & (conf == 0))
        if in_bin.any():
            gap = abs(correct[in_bin].mean() - conf[in_bin].mean())
            ece, mce = ece + in_bin.mean() * gap, max(mce, gap)
    return ece, mce


def test_softmax_of_decision_function_is_predict_proba(con, digits):
    logits, proba, _, table = digits
    con.register("d", table)
    got = np.array([r[0] for r in con.sql("SELECT softmax(logits) FROM d ORDER BY i").fetchall()])
    assert np.allclose(got, proba, rtol=1e-12, atol=1e-300)


def test_mean_cross_entropy_equals_sklearn_log_loss(con, digits):
    logits, proba, labels, table = digits
    con.register("d", table)
    from_logits, from_probs = con.sql(
        "SELECT avg(cross_entropy(logits, label)), avg(cross_entropy_probs(probs, label)) FROM d"
    ).fetchall()[0]
    expected = log_loss(labels, proba)  # sklearn.metrics.log_loss
    assert from_logits == pytest.approx(expected, rel=1e-9)
    assert from_probs == pytest.approx(expected, rel=1e-9)
    assert from_logits == pytest.approx(
        0.10229344567962631, rel=1e-6
    )  # sklearn.metrics.log_loss, scikit-learn 1.9.1


def test_accuracy_and_brier_sum(con, digits):
    logits, proba, labels, table = digits
    con.register("d", table)
    acc, brier = con.sql(
        "SELECT avg(is_correct(logits, label)::DOUBLE), avg(brier_score(logits, label)) FROM d"
    ).fetchall()[0]
    assert (
        acc == accuracy_score(labels, logits.argmax(axis=1)) == 525 / 540
    )  # sklearn accuracy_score
    # Brier (1950) sum over classes; sklearn halves only below 3 columns (scale_by_half="auto").
    assert brier == pytest.approx(brier_score_loss(labels, proba, labels=range(10)), rel=1e-9)
    assert brier == pytest.approx(0.049918940832482606, rel=1e-6)


@pytest.mark.parametrize(
    "bins, ece_recorded", [(15, 0.022187818228841118), (10, 0.02328333143742555)]
)
def test_calibration_bins_ece_and_mce(con, digits, bins, ece_recorded):
    logits, proba, labels, table = digits
    con.register("d", table)
    rows = con.execute(
        """
        SELECT calibration_bin(confidence(logits), $1) AS bin, count(*) AS n,
               avg(is_correct(logits, label)::DOUBLE) AS acc, avg(confidence(logits)) AS conf
        FROM d GROUP BY bin ORDER BY bin""",
        [bins],
    ).fetchall()
    conf, correct = proba.max(axis=1), (proba.argmax(axis=1) == labels).astype(float)
    ref_bins = np.searchsorted(
        np.linspace(0, 1, bins + 1)[1:-1], conf, side="left"
    )  # calibration_curve rule
    assert [r[0] for r in rows] == sorted(set(ref_bins.tolist()))
    for b, n, acc, c in rows:
        assert n == (ref_bins == b).sum()
        assert acc == pytest.approx(correct[ref_bins == b].mean(), rel=1e-12)
        assert c == pytest.approx(conf[ref_bins == b].mean(), rel=1e-12)
    ece = sum(n / len(labels) * abs(acc - c) for _, n, acc, c in rows)
    mce = max(abs(acc - c) for _, n, acc, c in rows)
    assert (ece, mce) == pytest.approx(numpy_ece_mce(conf, correct, bins), rel=1e-9)
    assert ece == pytest.approx(ece_recorded, rel=1e-6)
    if bins == 15:
        assert mce == pytest.approx(0.3589729219628035, rel=1e-6)  # a single-sample bin


def test_row_stats_rollup_gives_the_same_numbers(con, digits):
    logits, proba, labels, table = digits
    con.register("d", table)
    loss, acc, brier, entropy = con.sql("""
        SELECT avg(s.loss), avg(s.correct::DOUBLE), avg(s.brier), avg(s.entropy)
        FROM (SELECT logit_row_stats(logits, label, 15) AS s FROM d)""").fetchall()[0]
    assert loss == pytest.approx(log_loss(labels, proba), rel=1e-9)
    assert acc == 525 / 540
    assert brier == pytest.approx(brier_score_loss(labels, proba, labels=range(10)), rel=1e-9)
    assert entropy == pytest.approx(
        special.entr(proba).sum(axis=1).mean(), rel=1e-9
    )  # scipy.special.entr


def test_breast_cancer_single_logit(con):
    # decision_function gives the log-odds of class 1: logits [0, z] (sklearn LogisticRegression.decision_function docs).
    z, proba, labels = fitted(load_breast_cancer)
    con.register("b", pa.table({"z": z, "y": labels}))
    bce, acc = con.sql(
        "SELECT avg(binary_cross_entropy(z, y)), avg(is_correct([0.0, z], y)::DOUBLE) FROM b"
    ).fetchall()[0]
    assert bce == pytest.approx(log_loss(labels, proba), rel=1e-9)  # sklearn log_loss
    assert bce == pytest.approx(0.08456587250726075, rel=1e-6)
    assert acc == pytest.approx(accuracy_score(labels, (z > 0).astype(int)), rel=1e-15)
    assert acc == pytest.approx(0.9590643274853801, rel=1e-6)
