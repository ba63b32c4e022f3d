"""Per-class views: class_metrics, confusion and class_calibration.

Specification: on a realistic log (load_digits, shipped with scikit-learn: a standardised
logistic regression's 10 logits on the 540-row stratified test split, spread over two weeks
and two model versions, with unlabelled, out-of-range and NULL-score rows mixed in), every
period x version cell of each query equals its outside reference computed on that cell's
evaluated rows: scikit-learn precision_recall_fscore_support / classification_report /
confusion_matrix / top_k_accuracy_score / calibration_curve, and a direct numpy computation
of the class-wise calibration error of Kull et al. (2019), "Beyond temperature scaling",
NeurIPS (classwise-ECE = 1/K sum_j sum_i |B_ij|/n |y_j(B_ij) - p_j(B_ij)|).
"""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import special
from sklearn.calibration import calibration_curve
from sklearn.datasets import load_digits
from sklearn.linear_model import LogisticRegression
from sklearn.metrics import (
    classification_report,
    confusion_matrix,
    precision_recall_fscore_support,
    top_k_accuracy_score,
)
from sklearn.model_selection import train_test_split
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler

from dbmetrics.queries import run_query

K = 10


@pytest.fixture(scope="module")
def digits_log(tmp_path_factory):
    """The digits test split as a prediction log, plus the clean arrays per row."""
    X, y = load_digits(return_X_y=True)
    Xtr, Xte, ytr, yte = train_test_split(X, y, test_size=0.3, random_state=0, stratify=y)
    clf = make_pipeline(StandardScaler(), LogisticRegression(max_iter=1000, random_state=0))
    logits = clf.fit(Xtr, ytr).decision_function(Xte)
    rng = np.random.default_rng(3)
    n = len(yte)
    day = rng.integers(0, 14, n)
    version = rng.choice(["v1", "v2"], n)
    labels = [int(v) for v in yte]
    scores = [list(r) for r in logits]
    dirty = rng.choice(n, 30, replace=False)
    for j, i in enumerate(dirty):  # not evaluated: left out of every reference
        if j % 3 == 0:
            labels[i] = None
        elif j % 3 == 1:
            labels[i] = 12
        else:
            scores[i] = None
    path = tmp_path_factory.mktemp("digits") / "log.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": [dt.date(2026, 3, 2) + dt.timedelta(days=int(d)) for d in day],
                "model_version": version,
                "logits": pa.array(scores, pa.list_(pa.float64())),
                "label": pa.array(labels, pa.int64()),
            }
        ),
        path,
    )
    evaluated = np.ones(n, bool)
    evaluated[dirty] = False
    week = np.where(day < 7, 0, 1)
    return {
        "logs": str(path),
        "logits": logits,
        "y": np.asarray(yte),
        "evaluated": evaluated,
        "cell": {
            (dt.date(2026, 3, 2) + dt.timedelta(days=7 * int(w)), v): (week == w) & (version == v)
            for w in (0, 1)
            for v in ("v1", "v2")
        },
    }


def cells(digits_log):
    """(period, version, logits, labels) of each cell's evaluated rows."""
    for (period, version), mask in digits_log["cell"].items():
        keep = mask & digits_log["evaluated"]
        yield period, version, digits_log["logits"][keep], digits_log["y"][keep]


def rows_of(table, period, version, **match):
    return [
        r
        for r in table.to_pylist()
        if r["period"] == period
        and r["model_version"] == version
        and all(r[k] == v for k, v in match.items())
    ]


def kull_classwise(p, y, bins):
    """Per-class calibration error with equal-width right-closed bins (0 in bin 0), Kull et
    al. (2019): sum_i |B_ij|/n |mean(y == j) - mean(p_j)| over the bins of class j."""
    edges = np.linspace(0, 1, bins + 1)
    out = []
    for j in range(p.shape[1]):
        b = np.searchsorted(edges[1:-1], p[:, j], side="left")
        err = 0.0
        for m in np.unique(b):
            in_bin = b == m
            err += in_bin.sum() / len(y) * abs((y[in_bin] == j).mean() - p[in_bin, j].mean())
        out.append(err)
    return np.array(out)


def test_class_rows_equal_sklearn_precision_recall_fscore_support(con, digits_log):
    table = run_query(con, "class_metrics", {"logs": digits_log["logs"]})
    for period, version, z, y in cells(digits_log):
        pred = z.argmax(1)
        # sklearn.metrics.precision_recall_fscore_support, per class
        precision, recall, f1, support = precision_recall_fscore_support(
            y, pred, labels=range(K), zero_division=np.nan
        )
        got = sorted(rows_of(table, period, version, average=None), key=lambda r: r["class"])
        assert [r["class"] for r in got] == list(range(K))
        assert [r["support"] for r in got] == support.tolist()
        assert [r["predicted_rows"] for r in got] == np.bincount(pred, minlength=K).tolist()
        assert [r["correct_rows"] for r in got] == [
            int(((pred == y) & (y == c)).sum()) for c in range(K)
        ]
        for name, expected in (("precision", precision), ("recall", recall), ("f1", f1)):
            values = np.array([np.nan if r[name] is None else r[name] for r in got])
            np.testing.assert_allclose(values, expected, rtol=1e-12, err_msg=name)


@pytest.mark.parametrize("average", ["macro", "weighted"])
def test_average_rows_equal_sklearn_averages_and_classification_report(con, digits_log, average):
    table = run_query(con, "class_metrics", {"logs": digits_log["logs"]})
    for period, version, z, y in cells(digits_log):
        pred = z.argmax(1)
        (row,) = rows_of(table, period, version, average=average)
        # sklearn.metrics.precision_recall_fscore_support(average=...), default zero_division
        precision, recall, f1, _ = precision_recall_fscore_support(y, pred, average=average)
        assert row["precision"] == pytest.approx(precision, rel=1e-12)
        assert row["recall"] == pytest.approx(recall, rel=1e-12)
        assert row["f1"] == pytest.approx(f1, rel=1e-12)
        # sklearn.metrics.classification_report(output_dict=True): "macro avg" / "weighted avg"
        report = classification_report(y, pred, output_dict=True, zero_division=0)
        key = f"{average} avg"
        assert row["f1"] == pytest.approx(report[key]["f1-score"], rel=1e-12)
        assert row["support"] == report[key]["support"] == len(y)


def test_a_class_never_predicted_counts_as_zero_precision_in_the_macro_average(con, tmp_path):
    """sklearn's default zero_division: an undefined precision enters averages as 0."""
    y = np.array([0, 0, 1, 1, 2, 2])
    z = np.array([[3, 0, 0], [3, 0, 0], [0, 3, 0], [3, 0, 0], [0, 3, 0], [0, 3, 0.0]])
    path = tmp_path / "log.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": [dt.date(2026, 3, 2)] * 6,
                "model_version": ["v"] * 6,
                "logits": pa.array(list(z), pa.list_(pa.float64())),
                "label": y,
            }
        ),
        path,
    )
    table = run_query(con, "class_metrics", {"logs": str(path)})
    by = {(r["class"], r["average"]): r for r in table.to_pylist()}
    assert by[(2, None)]["precision"] is None and by[(2, None)]["recall"] == 0
    precision, recall, f1, _ = precision_recall_fscore_support(
        y,
        z.argmax(1),
        average="macro",
        zero_division=0,  # what the default "warn" gives
    )
    assert by[(None, "macro")]["precision"] == pytest.approx(precision, rel=1e-12)
    assert by[(None, "macro")]["f1"] == pytest.approx(f1, rel=1e-12)


def test_class_probabilities_losses_and_classwise_calibration_equal_numpy(con, digits_log):
    table = run_query(con, "class_metrics", {"logs": digits_log["logs"], "bins": "10"})
    for period, version, z, y in cells(digits_log):
        p = special.softmax(z, axis=1)
        loss = -special.log_softmax(z, axis=1)[np.arange(len(y)), y]
        got = sorted(rows_of(table, period, version, average=None), key=lambda r: r["class"])
        np.testing.assert_allclose([r["mean_probability"] for r in got], p.mean(0), rtol=1e-12)
        np.testing.assert_allclose(
            [r["label_frequency"] for r in got], np.bincount(y, minlength=K) / len(y), rtol=1e-12
        )
        np.testing.assert_allclose(
            [r["cross_entropy"] for r in got],
            [loss[y == c].mean() for c in range(K)],
            rtol=1e-12,
        )
        per_class = kull_classwise(p, y, 10)  # Kull et al. (2019), direct numpy
        np.testing.assert_allclose(
            [r["calibration_error"] for r in got], per_class, rtol=1e-10, atol=1e-15
        )
        (macro,) = rows_of(table, period, version, average="macro")
        assert macro["calibration_error"] == pytest.approx(per_class.mean(), rel=1e-10)
        (weighted,) = rows_of(table, period, version, average="weighted")
        assert weighted["cross_entropy"] == pytest.approx(loss.mean(), rel=1e-12)


def test_top_k_recall_of_the_weighted_row_equals_sklearn_top_k_accuracy(con, digits_log):
    table = run_query(con, "class_metrics", {"logs": digits_log["logs"]})
    for period, version, z, y in cells(digits_log):
        (row,) = rows_of(table, period, version, average="weighted")
        labels = list(range(K))
        # sklearn.metrics.top_k_accuracy_score (no tied scores in this data)
        assert row["recall"] == pytest.approx(top_k_accuracy_score(y, z, k=1, labels=labels))
        assert row["top3_recall"] == pytest.approx(top_k_accuracy_score(y, z, k=3, labels=labels))
        assert row["top5_recall"] == pytest.approx(top_k_accuracy_score(y, z, k=5, labels=labels))
        got = sorted(rows_of(table, period, version, average=None), key=lambda r: r["class"])
        for c in range(K):
            if (y == c).any():
                assert got[c]["top3_recall"] == pytest.approx(
                    top_k_accuracy_score(y[y == c], z[y == c], k=3, labels=labels)
                )


def test_top_k_is_null_where_k_does_not_exceed_the_classes_and_ties_go_to_the_lowest_index(
    con, tmp_path
):
    z = np.array([[1.0, 1.0, 0.0], [0.0, 2.0, 2.0], [5.0, 0.0, 0.0]])
    path = tmp_path / "log.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": [dt.date(2026, 3, 2)] * 3,
                "model_version": ["v"] * 3,
                "logits": pa.array(list(z), pa.list_(pa.float64())),
                "label": [1, 2, 0],
            }
        ),
        path,
    )
    table = run_query(con, "class_metrics", {"logs": str(path)})
    (weighted,) = [r for r in table.to_pylist() if r["average"] == "weighted"]
    # label 1 ties class 0 (lower index first: rank 2), label 2 ties class 1 (rank 2)
    assert weighted["recall"] == pytest.approx(1 / 3)
    assert weighted["top3_recall"] is None and weighted["top5_recall"] is None


def test_confusion_equals_sklearn_confusion_matrix(con, digits_log):
    table = run_query(con, "confusion", {"logs": digits_log["logs"]})
    for period, version, z, y in cells(digits_log):
        expected = confusion_matrix(y, z.argmax(1), labels=range(K))  # sklearn.metrics
        got = np.zeros((K, K), int)
        for r in rows_of(table, period, version):
            got[r["label"], r["predicted"]] = r["rows"]
            assert r["rows"] > 0
            assert r["label_rows"] == expected[r["label"]].sum()
            assert r["rate"] == pytest.approx(r["rows"] / expected[r["label"]].sum())
        np.testing.assert_array_equal(got, expected)
        # sklearn.metrics.confusion_matrix(normalize="true"): the row-normalised rates
        rates = confusion_matrix(y, z.argmax(1), labels=range(K), normalize="true")
        for r in rows_of(table, period, version):
            assert r["rate"] == pytest.approx(rates[r["label"], r["predicted"]], rel=1e-12)


def test_class_calibration_of_each_class_equals_sklearn_calibration_curve(con, digits_log):
    table = run_query(con, "class_calibration", {"logs": digits_log["logs"], "bins": "8"})
    for period, version, z, y in cells(digits_log):
        p = special.softmax(z, axis=1)
        for c in (0, 3, 9):
            rows = sorted(rows_of(table, period, version, **{"class": c}), key=lambda r: r["bin"])
            # sklearn.calibration.calibration_curve(y == c, p_c, n_bins=8): non-empty bins only
            prob_true, prob_pred = calibration_curve(y == c, p[:, c], n_bins=8)
            np.testing.assert_allclose([r["label_frequency"] for r in rows], prob_true, rtol=1e-12)
            np.testing.assert_allclose([r["mean_probability"] for r in rows], prob_pred, rtol=1e-12)
            assert rows[0]["calibration_error"] == pytest.approx(
                kull_classwise(p, y, 8)[c], rel=1e-10
            )


def test_only_class_keeps_one_class(con, digits_log):
    table = run_query(con, "class_calibration", {"logs": digits_log["logs"], "only_class": "4"})
    assert set(table.column("class").to_pylist()) == {4}
