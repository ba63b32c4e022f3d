"""Predicted class, correctness, confidence, margin and calibration bins (ECE / MCE).

Outside references: numpy.argmax (first maximum), sklearn.metrics.accuracy_score
docstring, sklearn.calibration.calibration_curve binning (source read), Guo et al.
(2017) and Naeini et al. (2015) for ECE/MCE; expected values re-derived here with exact
fractions and with scikit-learn where it applies.
"""

import math

import numpy as np
import pyarrow as pa
import pytest
from scipy import special
from sklearn.calibration import calibration_curve
from sklearn.metrics import accuracy_score


def one(con, sql, *params):
    return con.execute(sql, list(params)).fetchall()[0][0]


def column(con, sql):
    return [r[0] for r in con.sql(sql).fetchall()]


def lists(rows):
    return pa.array(rows, pa.list_(pa.float64()))


# ---------------------------------------------------------------- predicted class / accuracy


# G1: sklearn accuracy_score docstring: y_true [0,1,2,3], y_pred [0,2,1,3] -> 0.5.
def test_g1_accuracy_matches_sklearn_docstring(con):
    scores = np.eye(4)[[0, 2, 1, 3]] * 5.0  # argmax = y_pred
    con.register("t", pa.table({"z": lists(scores.tolist()), "y": [0, 1, 2, 3]}))
    assert one(con, "SELECT avg(is_correct(z, y)::DOUBLE) FROM t") == 0.5
    assert accuracy_score([0, 1, 2, 3], [0, 2, 1, 3]) == 0.5


# G2: ties go to the first maximum, like numpy.argmax and torch.argmax.
@pytest.mark.parametrize("k", [3, 40])  # both sides of the short-row loop (32 classes)
def test_g2_ties_go_to_the_lowest_class(con, k):
    z = [0.0] * k
    z[1] = z[k - 1] = 1.0
    assert one(con, "SELECT predicted_class($1::DOUBLE[])", z) == 1 == int(np.argmax(z))
    assert one(con, "SELECT predicted_class([1.0, 1, 0])") == 0
    assert one(con, "SELECT is_correct([1.0, 1, 0], 0)") is True
    assert one(con, "SELECT is_correct([1.0, 1, 0], 1)") is False


def test_predicted_class_matches_numpy_argmax_on_logits_and_probabilities(con):
    rng = np.random.default_rng(5)
    z = np.round(rng.normal(0, 2, (600, 6)), 1)  # rounding makes ties common
    con.register("t", pa.table({"i": np.arange(600), "z": lists(z.tolist())}))
    got = column(con, "SELECT predicted_class(z) FROM t ORDER BY i")
    assert got == np.argmax(z, axis=1).tolist()
    got_p = column(con, "SELECT predicted_class(softmax(z)) FROM t ORDER BY i")
    assert got_p == np.argmax(special.softmax(z, axis=1), axis=1).tolist()


def test_masked_classes_are_never_predicted(con):
    assert one(con, "SELECT predicted_class(['-inf'::DOUBLE, -1e4, '-inf'::DOUBLE])") == 1


@pytest.mark.parametrize(
    "scores",
    [
        "['nan'::DOUBLE, 1.0]",
        "['inf'::DOUBLE, 1.0]",
        "['-inf'::DOUBLE, '-inf'::DOUBLE]",
        "[]::DOUBLE[]",
        "NULL",
    ],
)
@pytest.mark.parametrize("call", ["predicted_class({})", "is_correct({}, 0)"])
def test_undefined_scores_have_no_prediction(con, call, scores):
    # CONTRACT input rules: NaN -> NULL, +inf logit -> NULL, all -inf -> NULL, NULL/empty -> NULL.
    assert one(con, "SELECT " + call.format(scores)) is None


# ---------------------------------------------------------------- confidence and margin


def test_confidence_and_margin_from_logits_match_scipy_softmax(con):
    rng = np.random.default_rng(6)
    z = rng.normal(0, 3, (300, 5))
    con.register("t", pa.table({"i": np.arange(300), "z": lists(z.tolist())}))
    conf, marg = map(
        np.array, zip(*con.sql("SELECT confidence(z), margin(z) FROM t ORDER BY i").fetchall())
    )
    p = np.sort(special.softmax(z, axis=1), axis=1)  # scipy.special.softmax
    assert np.allclose(conf, p[:, -1], rtol=1e-13, atol=0)
    assert np.allclose(marg, p[:, -1] - p[:, -2], rtol=1e-9, atol=1e-16)
    probs = special.softmax(z, axis=1)
    con.register("u", pa.table({"i": np.arange(300), "p": lists(probs.tolist())}))
    conf_p, marg_p = map(
        np.array,
        zip(*con.sql("SELECT confidence_probs(p), margin_probs(p) FROM u ORDER BY i").fetchall()),
    )
    assert np.allclose(conf_p, p[:, -1], rtol=1e-13, atol=0)
    assert np.allclose(marg_p, p[:, -1] - p[:, -2], rtol=1e-9, atol=1e-15)


def test_confidence_and_margin_examples(con):
    assert one(con, "SELECT margin_probs([0.2, 0.5, 0.3])") == pytest.approx(0.2, rel=1e-14)
    assert one(con, "SELECT confidence_probs([0.2, 0.5, 0.3])") == 0.5
    assert one(con, "SELECT confidence([1e4, -1e4, 0.0])") == 1.0
    assert one(con, "SELECT margin([1e4, -1e4, 0.0])") == 1.0
    assert one(con, "SELECT margin([3.0, 3.0, 0.0])") == 0.0
    assert one(con, "SELECT confidence([0.0, 0.0, 0.0, 0.0])") == 0.25  # at least 1/K
    assert one(con, "SELECT confidence_probs([0.5, 0.6])") is None  # not a distribution


def test_a_single_class_has_confidence_and_margin_one(con):
    assert one(con, "SELECT confidence([4.2])") == 1.0
    assert one(con, "SELECT margin([4.2])") == 1.0
    assert one(con, "SELECT margin_probs([1.0])") == 1.0


@pytest.mark.parametrize(
    "fn, scores",
    [
        ("margin", "['nan'::DOUBLE]"),
        ("margin", "['inf'::DOUBLE]"),
        ("margin", "['-inf'::DOUBLE]"),
        ("margin_probs", "['nan'::DOUBLE]"),
        ("margin_probs", "[0.5]"),
        ("margin", "['nan'::DOUBLE, 1.0]"),
        ("margin", "['-inf'::DOUBLE, '-inf'::DOUBLE]"),
        ("confidence", "['-inf'::DOUBLE]"),
        ("confidence_probs", "[0.5]"),
    ],
)
def test_undefined_rows_have_no_confidence_or_margin(con, fn, scores):
    # CONTRACT: NaN -> NULL, +inf logit -> NULL, all -inf -> NULL, not a distribution -> NULL;
    # this must hold for one class as well as for many.
    assert one(con, f"SELECT {fn}({scores})") is None


# ---------------------------------------------------------------- calibration bins


# sklearn.calibration.calibration_curve's binning (searchsorted on linspace(0, 1, 11)[1:-1],
# side='left'), B = 10: right-closed bins, 0 in bin 0.
@pytest.mark.parametrize(
    "conf, expected", [(0.0, 0), (0.1, 0), (0.3, 2), (0.5, 4), (0.7, 6), (1.0, 9)]
)
def test_bin_edges_follow_sklearn_calibration_curve(con, conf, expected):
    assert one(con, "SELECT calibration_bin($1, 10)", conf) == expected
    inner = np.linspace(0, 1, 11)[1:-1]  # sklearn.calibration.calibration_curve
    assert int(np.searchsorted(inner, conf, side="left")) == expected


# Dyadic edges are exact in binary: c = k/B sits in bin k-1 (Guo et al. 2017, I_m = ((m-1)/M, m/M]).
@pytest.mark.parametrize(
    "bins, conf, expected",
    [
        (4, 0.25, 0),
        (4, 0.75, 2),
        (20, 0.25, 4),
        (20, 0.75, 14),
        (10, 0.55, 5),
        (1, 0.0, 0),
        (1, 1.0, 0),
    ],
)
def test_dyadic_edges_close_on_the_right(con, bins, conf, expected):
    assert one(con, "SELECT calibration_bin($1, $2)", conf, bins) == expected


@pytest.mark.parametrize("bins", [1, 4, 10, 15, 20, 100])
def test_bins_match_numpy_searchsorted_on_linspace(con, bins):
    rng = np.random.default_rng(bins)
    edges = np.linspace(0, 1, bins + 1)
    conf = np.concatenate(
        [rng.random(2000), edges, np.nextafter(edges, 2), np.nextafter(edges, -1)]
    )
    conf = conf[(conf >= 0) & (conf <= 1)]
    con.register("t", pa.table({"i": np.arange(len(conf)), "c": conf}))
    got = column(con, f"SELECT calibration_bin(c, {bins}) FROM t ORDER BY i")
    assert got == np.searchsorted(edges[1:-1], conf, side="left").tolist()


def test_bins_agree_with_sklearn_calibration_curve(con):
    rng = np.random.default_rng(7)
    p = rng.random(3000)
    y = (rng.random(3000) < p**1.3).astype(int)
    con.register("t", pa.table({"p": p, "y": y}))
    got = con.sql(
        "SELECT avg(y::DOUBLE), avg(p) FROM t GROUP BY calibration_bin(p, 10) "
        "ORDER BY calibration_bin(p, 10)"
    ).fetchall()
    prob_true, prob_pred = calibration_curve(y, p, n_bins=10)  # sklearn: empty bins dropped
    assert np.allclose([g[0] for g in got], prob_true, rtol=1e-12)
    assert np.allclose([g[1] for g in got], prob_pred, rtol=1e-12)


@pytest.mark.parametrize("conf", [-1e-9, 1.0000001, float("nan"), float("inf"), None])
def test_confidence_outside_0_1_has_no_bin(con, conf):
    assert one(con, "SELECT calibration_bin($1::DOUBLE, 10)", conf) is None


def test_bins_must_be_positive(con):
    assert one(con, "SELECT calibration_bin(0.5, NULL)") is None
    with pytest.raises(
        Exception, match=r"calibration_bin: bins must be a whole number in 1..1000000, got 0"
    ):
        one(con, "SELECT calibration_bin(0.5, 0)")


ECE_SQL = """
    SELECT sum(n * abs(acc - conf)) / sum(n) AS ece, max(abs(acc - conf)) AS mce FROM (
        SELECT count(*) AS n, avg(correct::DOUBLE) AS acc, avg(conf) AS conf
        FROM t GROUP BY calibration_bin(conf, $1))
"""


def ece_mce(con, conf, correct, bins):
    con.register("t", pa.table({"conf": conf, "correct": correct}))
    return con.execute(ECE_SQL, [bins]).fetchall()[0]


def numpy_ece_mce(conf, correct, bins):
    """Independent computation: Guo et al. (2017) top-label ECE/MCE, right-closed bins."""
    conf, correct = np.asarray(conf), np.asarray(correct, float)
    edges = np.linspace(0, 1, bins + 1)
    ece, mce = 0.0, 0.0
    for m in range(bins):
        in_bin = (conf > edges[m]) & (conf <= edges[m + 1]) | ((m == 0) & (conf == 0))
        if in_bin.any():
            gap = abs(correct[in_bin].mean() - conf[in_bin].mean())
            ece += in_bin.mean() * gap
            mce = max(mce, gap)
    return ece, mce


# I1: Guo et al. (2017), M = 15: ECE = 0.371 (exactly 371/1000), MCE = 0.81; M = 10: 0.289, 0.845.
@pytest.mark.parametrize("bins, ece, mce", [(15, 0.371, 0.81), (10, 0.289, 0.845)])
def test_i1_top_label_ece_and_mce(con, bins, ece, mce):
    conf = [0.95, 0.92, 0.81, 0.78, 0.64, 0.55, 0.51, 0.40, 0.97, 0.88]
    correct = [1, 1, 0, 1, 1, 0, 1, 0, 1, 0]
    got_ece, got_mce = ece_mce(con, conf, correct, bins)
    assert got_ece == pytest.approx(ece, rel=1e-12)
    assert got_mce == pytest.approx(mce, rel=1e-12)
    assert (got_ece, got_mce) == pytest.approx(numpy_ece_mce(conf, correct, bins), rel=1e-12)


# I2: Naeini et al. (2015), binary positive-class probability, K = 10 bins: ECE 0.21, MCE 0.6.
def test_i2_naeini_binary_ece(con):
    y = [0, 0, 1, 1, 0, 1, 0, 1, 0, 0]
    p = [0.1, 0.4, 0.35, 0.8, 0.2, 0.7, 0.3, 0.9, 0.6, 0.05]
    got_ece, got_mce = ece_mce(con, p, y, 10)
    assert got_ece == pytest.approx(0.21, rel=1e-12)
    assert got_mce == pytest.approx(0.6, rel=1e-12)


# I3: pins the edge rule: right-closed bins give 0.475 / 0.5 (left-closed would give 0.025).
def test_i3_right_closed_edge(con):
    got_ece, got_mce = ece_mce(con, [0.5, 0.55], [0, 1], 10)
    assert got_ece == pytest.approx(0.475, rel=1e-12)
    assert got_mce == pytest.approx(0.5, rel=1e-12)
    assert math.isclose(got_ece, 0.025) is False
