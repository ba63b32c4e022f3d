"""Cross-entropy (hard and soft labels, logits and probabilities) and the Brier score.

Outside references: sklearn.metrics.log_loss / brier_score_loss (docstrings and
source read, 1.9.1), scipy.special.log_softmax / xlogy / log_expit, Brier (1950),
torch.nn.functional.cross_entropy conventions (documentation), Brier (1950).
"""

import math

import numpy as np
import pyarrow as pa
import pytest
from scipy import special
from sklearn.metrics import brier_score_loss, log_loss

LN2, LN3 = math.log(2), math.log(3)


def one(con, sql, *params):
    return con.execute(sql, list(params)).fetchall()[0][0]


def column(con, sql):
    return [r[0] for r in con.sql(sql).fetchall()]


def lists(rows):
    return pa.array(rows, pa.list_(pa.float64()))


# ---------------------------------------------------------------- hard labels, logits


# B1: all-zero logits give ln K (definition; torch F.cross_entropy).
@pytest.mark.parametrize(
    "k, ln_k",
    [
        (2, 0.6931471805599453),
        (3, 1.0986122886681098),
        (10, 2.302585092994046),
        (1000, 6.907755278982137),
    ],
)
def test_b1_uniform_prediction_costs_ln_k(con, k, ln_k):
    got = one(con, "SELECT cross_entropy(list_transform(range($1), lambda x: 0.0), $2)", k, k - 1)
    assert got == pytest.approx(ln_k, rel=1e-15)
    assert got == pytest.approx(math.log(k), rel=1e-15)


def test_uniform_prediction_costs_ln_k_whatever_the_logit_level_or_target(con):
    # Definition: -log(1/K) = ln K; soft targets give the same since sum(t) = 1.
    assert one(con, "SELECT cross_entropy([-5e3, -5e3, -5e3, -5e3], 2)") == pytest.approx(
        math.log(4), rel=1e-15
    )
    assert one(con, "SELECT soft_cross_entropy([7.0, 7, 7], [0.2, 0.3, 0.5])") == pytest.approx(
        LN3, rel=1e-15
    )
    assert one(con, "SELECT cross_entropy_probs([0.2, 0.2, 0.2, 0.2, 0.2], 4)") == pytest.approx(
        math.log(5), rel=1e-15
    )


# B2: logits [1,2,3], labels 0/1/2; torch per row, sklearn log_loss for the mean.
def test_b2_per_row_and_mean_match_sklearn_log_loss(con):
    got = column(con, "SELECT cross_entropy([1.0, 2, 3], y) FROM range(3) t(y) ORDER BY y")
    assert got == pytest.approx(
        [2.4076059644443803, 1.4076059644443803, 0.4076059644443803], rel=1e-14
    )
    p = special.softmax([1.0, 2.0, 3.0])
    assert np.mean(got) == pytest.approx(log_loss([0, 1, 2], [p, p, p]), rel=1e-12)
    assert np.mean(got) == pytest.approx(1.4076059644443803, rel=1e-14)
    assert math.exp(np.mean(got)) == pytest.approx(4.0861612696304876, rel=1e-14)  # F4: perplexity


# B3: [1e4, -1e4, 0]: exact per torch and scipy.special.log_softmax. (sklearn clips, so
# it is not a reference here: it gives 36.04 for the last two rows.)
def test_b3_extreme_logits_give_exact_losses(con):
    got = column(con, "SELECT cross_entropy([1e4, -1e4, 0.0], y) FROM range(3) t(y) ORDER BY y")
    assert got == [0.0, 20000.0, 10000.0]
    assert (-special.log_softmax([1e4, -1e4, 0.0])).tolist() == got


# B4: a masked true class costs +inf (torch; sklearn clips to 36.04, not a reference).
def test_b4_masked_true_class_costs_infinity(con):
    assert one(con, "SELECT cross_entropy([0.0, '-inf'::DOUBLE, 0.0], 0)") == pytest.approx(
        LN2, rel=1e-15
    )
    assert one(con, "SELECT cross_entropy([0.0, '-inf'::DOUBLE, 0.0], 1)") == math.inf


def test_hard_label_matches_scipy_log_softmax_on_random_rows(con):
    rng = np.random.default_rng(2)
    z = rng.normal(0, 2, (500, 6))  # no probability below sklearn's eps clip
    y = rng.integers(0, 6, 500)
    con.register("t", pa.table({"i": np.arange(500), "z": lists(z.tolist()), "y": y}))
    got = np.array(column(con, "SELECT cross_entropy(z, y) FROM t ORDER BY i"))
    ref = -special.log_softmax(z, axis=1)[np.arange(500), y]  # scipy.special.log_softmax
    assert np.allclose(got, ref, rtol=1e-12, atol=1e-15)
    assert got.mean() == pytest.approx(
        log_loss(y, special.softmax(z, axis=1), labels=range(6)), rel=1e-9
    )


# ---------------------------------------------------------------- hard labels, probabilities


# B5: sklearn log_loss docstring: columns follow sorted labels (ham = 0, spam = 1).
def test_b5_sklearn_docstring_example(con):
    con.register(
        "t",
        pa.table(
            {
                "i": range(4),
                "p": lists([[0.1, 0.9], [0.9, 0.1], [0.8, 0.2], [0.35, 0.65]]),
                "y": [1, 0, 0, 1],
            }
        ),
    )
    got = column(con, "SELECT cross_entropy_probs(p, y) FROM t ORDER BY i")
    assert np.mean(got) == pytest.approx(0.21616187468057912, rel=1e-12)
    assert np.mean(got) == pytest.approx(
        log_loss(
            ["spam", "ham", "ham", "spam"], [[0.1, 0.9], [0.9, 0.1], [0.8, 0.2], [0.35, 0.65]]
        ),
        rel=1e-12,
    )


def test_probability_zero_on_the_true_class_costs_infinity(con):
    # -log 0 = +inf (definition; sklearn.metrics.log_loss clips to 36.04365338911715).
    assert one(con, "SELECT cross_entropy_probs([0.5, 0.5, 0.0], 2)") == math.inf
    assert one(con, "SELECT cross_entropy_probs([1.0, 0.0], 0)") == 0.0


def test_probabilities_are_checked_and_renormalised(con):
    # CONTRACT: sum within 1e-3 of 1 -> renormalised; otherwise NULL (not a distribution).
    assert one(con, "SELECT cross_entropy_probs([0.2, 0.8005], 1)") == pytest.approx(
        -math.log(0.8005 / 1.0005), rel=1e-14
    )
    assert one(con, "SELECT cross_entropy_probs([0.5, 0.6], 0)") is None
    assert one(con, "SELECT cross_entropy_probs([1.2, -0.2], 0)") is None


# ---------------------------------------------------------------- soft targets


# C1: p* = [0.1, 0.6, 0.3], logits [1,2,3] (mpmath; torch with a probability target).
def test_c1_soft_target_and_the_identity_ce_equals_h_plus_kl(con):
    ce = one(con, "SELECT soft_cross_entropy([1.0, 2, 3], [0.1, 0.6, 0.3])")
    h = one(con, "SELECT shannon_entropy([0.1, 0.6, 0.3])")
    kl = one(con, "SELECT kl_divergence([0.1, 0.6, 0.3], softmax([1.0, 2, 3]))")
    assert ce == pytest.approx(1.2076059644443803, rel=1e-14)
    assert h == pytest.approx(0.89794572485677978, rel=1e-14)
    assert kl == pytest.approx(0.30966023958760053, rel=1e-12)
    # Cover & Thomas [mem]; also stated in the scipy.stats.entropy docstring [lib].
    assert ce == pytest.approx(h + kl, rel=1e-14)


# C2: Kullback's P = Binomial(2, 0.4) against a uniform prediction: H + KL = ln 3.
def test_c2_kullback_distribution_against_uniform(con):
    ce = one(con, "SELECT soft_cross_entropy_probs([1/3, 1/3, 1/3], [0.36, 0.48, 0.16])")
    assert ce == pytest.approx(LN3, rel=1e-14)
    assert ce == pytest.approx(1.0133126873497391 + 0.085299601318370568, rel=1e-14)
    assert one(con, "SELECT soft_cross_entropy([0.0, 0, 0], [0.36, 0.48, 0.16])") == pytest.approx(
        LN3, rel=1e-14
    )


# C3: torch label_smoothing=0.1 equals the target (1 - eps) onehot + eps / K (Szegedy et al. 2016).
def test_c3_label_smoothing_as_a_soft_target(con):
    eps, k = 0.1, 3
    smoothed = [(1 - eps) * (j == 2) + eps / k for j in range(k)]
    assert one(con, "SELECT soft_cross_entropy([1.0, 2, 3], $1)", smoothed) == pytest.approx(
        0.5076059644443804, rel=1e-14
    )
    mixed = [(1 - eps) * t + eps / k for t in (0.1, 0.6, 0.3)]
    assert one(con, "SELECT soft_cross_entropy([1.0, 2, 3], $1)", mixed) == pytest.approx(
        1.2276059644443804, rel=1e-14
    )


# C4: 0 log 0 = 0 (scipy.special.xlogy convention); torch returns nan here, so it is not a reference.
def test_c4_zero_target_on_a_masked_class_contributes_nothing(con):
    got = one(con, "SELECT soft_cross_entropy([0.0, 0, '-inf'::DOUBLE], [0.5, 0.5, 0])")
    assert got == pytest.approx(LN2, rel=1e-15)
    assert special.xlogy(0.0, 0.0) == 0.0
    assert one(
        con, "SELECT soft_cross_entropy_probs([0.5, 0.5, 0.0], [0.5, 0.5, 0])"
    ) == pytest.approx(LN2, rel=1e-15)


def test_positive_target_on_a_masked_class_costs_infinity(con):
    # -t log 0 = +inf for t > 0 (scipy.special.xlogy(0.1, 0) = -inf).
    assert (
        one(con, "SELECT soft_cross_entropy([0.0, 0, '-inf'::DOUBLE], [0.45, 0.45, 0.1])")
        == math.inf
    )
    assert (
        one(con, "SELECT soft_cross_entropy_probs([0.5, 0.5, 0.0], [0.45, 0.45, 0.1])") == math.inf
    )


def test_one_hot_soft_target_equals_the_hard_label(con):
    assert one(con, "SELECT soft_cross_entropy([1e4, -1e4, 0.0], [0.0, 1, 0])") == 20000.0
    assert one(con, "SELECT soft_cross_entropy([0.3, -1.2, 2.5], [0.0, 0, 1])") == pytest.approx(
        one(con, "SELECT cross_entropy([0.3, -1.2, 2.5], 2)"), rel=1e-15
    )


def test_soft_target_that_is_not_a_distribution_gives_null(con):
    # CONTRACT: targets are checked like probabilities (no negatives, sum within 1e-3 of 1).
    assert one(con, "SELECT soft_cross_entropy([1.0, 2, 3], [0.5, 0.5, 0.5])") is None
    assert one(con, "SELECT soft_cross_entropy([1.0, 2, 3], [1.5, -0.5, 0])") is None
    assert one(con, "SELECT soft_cross_entropy([1.0, 2, 3], [0.5, 'nan'::DOUBLE, 0.5])") is None


# ---------------------------------------------------------------- binary, one score per row


def test_binary_cross_entropy_matches_sklearn_log_loss_and_scipy(con):
    s = np.array([-12.0, -4.0, -0.5, 0.0, 0.25, 3.0, 7.5, 12.0])
    y = np.array([0, 1, 0, 1, 1, 0, 1, 1])
    con.register("t", pa.table({"i": np.arange(len(s)), "s": s, "y": y}))
    got = np.array(column(con, "SELECT binary_cross_entropy(s, y) FROM t ORDER BY i"))
    # scipy.special.log_expit: -log sigma(s) for y = 1, -log sigma(-s) for y = 0
    ref = -np.where(y == 1, special.log_expit(s), special.log_expit(-s))
    assert np.allclose(got, ref, rtol=1e-9, atol=0)
    ref_sklearn = [log_loss([yi], [special.expit(si)], labels=[0, 1]) for si, yi in zip(s, y)]
    assert np.allclose(got, ref_sklearn, rtol=1e-9, atol=0)


@pytest.mark.parametrize("s", [25.0, 30.0, 40.0])
def test_binary_cross_entropy_is_accurate_for_confident_correct_predictions(con, s):
    # -log sigma(s) = log1p(e^-s) ~ e^-s: scipy.special.log_expit is accurate to a few ulp
    # here (and so is torch BCEWithLogits, softplus form [mem]). sklearn log_loss works
    # from p = expit(s), already rounded to 1 - tiny, so it is not a reference at this range.
    assert one(con, "SELECT binary_cross_entropy($1, 1)", s) == pytest.approx(
        -special.log_expit(s), rel=1e-12, abs=0
    )
    expected = math.log1p(math.exp(-s))
    assert one(con, "SELECT binary_cross_entropy($1, 0)", -s) == pytest.approx(
        expected, rel=1e-12, abs=0
    )


def test_binary_cross_entropy_extremes(con):
    # Wrapping: logit s -> logits [0, s] (CONTRACT). log(1 + e^1e4) = 1e4 exactly in float64.
    assert one(con, "SELECT binary_cross_entropy(1e4, 0)") == 1e4
    assert one(con, "SELECT binary_cross_entropy(1e4, 1)") == 0.0
    assert one(con, "SELECT binary_cross_entropy('-inf', 1)") == math.inf
    assert one(con, "SELECT binary_cross_entropy('-inf', 0)") == 0.0
    assert one(con, "SELECT binary_cross_entropy('inf', 1)") is None  # +inf logit -> NULL
    assert one(con, "SELECT binary_cross_entropy('nan', 1)") is None
    assert one(con, "SELECT binary_cross_entropy(NULL, 1)") is None
    assert one(con, "SELECT binary_cross_entropy(0.0, NULL)") is None


def test_binary_cross_entropy_prob_matches_sklearn_log_loss(con):
    p = np.array([0.01, 0.2, 0.5, 0.7, 0.999, 0.35])
    y = np.array([0, 1, 1, 0, 1, 1])
    con.register("t", pa.table({"i": range(len(p)), "p": p, "y": y}))
    got = column(con, "SELECT binary_cross_entropy_prob(p, y) FROM t ORDER BY i")
    ref = [log_loss([yi], [pi], labels=[0, 1]) for pi, yi in zip(p, y)]  # sklearn log_loss
    assert got == pytest.approx(ref, rel=1e-12)
    assert np.mean(got) == pytest.approx(log_loss(y, p), rel=1e-12)


def test_binary_cross_entropy_prob_edges(con):
    assert (
        one(con, "SELECT binary_cross_entropy_prob(0.0, 1)") == math.inf
    )  # sklearn clips to 36.04
    assert one(con, "SELECT binary_cross_entropy_prob(0.0, 0)") == 0.0
    assert one(con, "SELECT binary_cross_entropy_prob(1.5, 1)") is None  # not a probability
    assert one(con, "SELECT binary_cross_entropy_prob(-0.1, 0)") is None
    assert one(con, "SELECT binary_cross_entropy_prob('nan', 0)") is None


# ---------------------------------------------------------------- Brier score


# H1: Wikipedia "Brier score" examples (binary form, [0, 1]); floats inexact.
@pytest.mark.parametrize(
    "p, rain, expected", [(0.7, 1, 0.09), (0.3, 1, 0.49), (0.5, 1, 0.25), (1.0, 0, 1.0)]
)
def test_h1_binary_brier_wikipedia_examples(con, p, rain, expected):
    assert one(con, "SELECT binary_brier_score($1, $2)", p, rain) == pytest.approx(
        expected, rel=1e-12
    )
    assert one(con, "SELECT binary_brier_score($1, $2)", p, rain) == pytest.approx(
        brier_score_loss([rain], [p], labels=[0, 1]), rel=1e-12
    )


# H2: sklearn brier_score_loss docstring: 0.0375, and 0.075 with scale_by_half=False (Brier's sum).
def test_h2_sklearn_docstring_binary_and_brier_sum(con):
    y, p = [0, 1, 1, 0], [0.1, 0.9, 0.8, 0.3]
    con.register("t", pa.table({"i": range(4), "y": y, "p": p}))
    binary = column(con, "SELECT binary_brier_score(p, y) FROM t ORDER BY i")
    summed = column(con, "SELECT brier_score_probs([1 - p, p], y) FROM t ORDER BY i")
    assert np.mean(binary) == pytest.approx(0.0375, rel=1e-12)
    assert np.mean(binary) == pytest.approx(brier_score_loss(y, p), rel=1e-12)
    assert np.mean(summed) == pytest.approx(0.075, rel=1e-12)
    assert np.mean(summed) == pytest.approx(brier_score_loss(y, p, scale_by_half=False), rel=1e-12)


# H3: multi-class Brier sum (Brier 1950, range [0, 2]); sklearn halves only below 3 columns.
def test_h3_multiclass_brier_sum(con):
    probs = [[0.2, 0.7, 0.1], [0.6, 0.3, 0.1], [0.1, 0.1, 0.8]]
    con.register("t", pa.table({"i": range(3), "p": lists(probs), "y": [1, 0, 0]}))
    got = column(con, "SELECT brier_score_probs(p, y) FROM t ORDER BY i")
    assert np.mean(got) == pytest.approx(0.62, rel=1e-12)
    assert np.mean(got) == pytest.approx(
        brier_score_loss([1, 0, 0], probs, labels=[0, 1, 2]), rel=1e-12
    )


# H4: binary 0.164, Brier's sum 0.328 (Brier 1950 form; recomputed here).
def test_h4_binary_is_half_of_brier_sum(con):
    y, p = [1, 0, 1, 1, 0], [0.9, 0.2, 0.6, 0.4, 0.5]
    con.register("t", pa.table({"i": range(5), "y": y, "p": p}))
    b, s = zip(
        *con.sql(
            "SELECT binary_brier_score(p, y), brier_score_probs([1 - p, p], y) FROM t"
        ).fetchall()
    )
    assert np.mean(b) == pytest.approx(0.164, rel=1e-12)
    assert np.mean(s) == pytest.approx(0.328, rel=1e-12)


# H5: Brier (1950): a constant forecast over 10 occasions with 3 rain [2nd, recomputed].
@pytest.mark.parametrize("p, expected", [(0.3, 0.42), (0.2, 0.44)])
def test_h5_brier_constant_forecasts(con, p, expected):
    got = column(con, f"SELECT brier_score_probs([1 - {p}, {p}], (i < 3)::INT) FROM range(10) t(i)")
    assert np.mean(got) == pytest.approx(expected, rel=1e-12)


def test_brier_from_logits_matches_sklearn_on_softmax(con):
    rng = np.random.default_rng(3)
    z = rng.normal(0, 3, (400, 5))
    y = rng.integers(0, 5, 400)
    con.register("t", pa.table({"i": range(400), "z": lists(z.tolist()), "y": y}))
    got = np.array(column(con, "SELECT brier_score(z, y) FROM t ORDER BY i"))
    p = special.softmax(z, axis=1)
    ref = ((p - np.eye(5)[y]) ** 2).sum(axis=1)  # Brier (1950) sum over classes
    assert np.allclose(got, ref, rtol=1e-12, atol=1e-16)
    assert got.mean() == pytest.approx(brier_score_loss(y, p, labels=range(5)), rel=1e-12)
    assert ((got >= 0) & (got <= 2)).all()


def test_brier_extremes(con):
    assert one(con, "SELECT brier_score([1e4, -1e4, 0.0], 0)") == 0.0
    assert one(con, "SELECT brier_score([1e4, -1e4, 0.0], 1)") == 2.0  # the maximum
    assert one(con, "SELECT brier_score([0.0, '-inf'::DOUBLE], 1)") == 2.0
    assert one(con, "SELECT brier_score_probs([0.5, 0.6], 1)") is None  # not a distribution


@pytest.mark.parametrize("p", [1.5, -0.2, "inf", "-inf"])
def test_binary_brier_of_a_value_outside_0_1_is_null(con, p):
    # Consistent with binary_cross_entropy_prob (NULL) and with sklearn brier_score_loss,
    # which rejects y_proba outside [0, 1]; a probability outside [0, 1] is not a forecast.
    assert one(con, "SELECT binary_cross_entropy_prob($1::DOUBLE, 1)", p) is None
    assert one(con, "SELECT binary_brier_score($1::DOUBLE, 1)", p) is None
