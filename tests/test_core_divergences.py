"""Entropy, KL and Jensen-Shannon divergences, PSI, and the as_distribution check.

Outside references: scipy.special rel_entr / entr / kl_div, scipy.stats.entropy,
scipy.spatial.distance.jensenshannon (sources and docstrings read), Kullback (1959)
via Wikipedia, Cover & Thomas (2006), Lin (1991), Siddiqi (2006) / Yurdakul (2018);
each value is recomputed here with scipy beside the published figure.
"""

import math

import numpy as np
import pyarrow as pa
import pytest
from scipy import special, stats
from scipy.spatial.distance import jensenshannon

LN2, LN3 = math.log(2), math.log(3)
P_KULLBACK = [0.36, 0.48, 0.16]  # Binomial(2, 0.4)
UNIFORM3 = [1 / 3, 1 / 3, 1 / 3]


def one(con, sql, *params):
    return con.execute(sql, list(params)).fetchall()[0][0]


def kl(con, p, q):
    return one(con, "SELECT kl_divergence($1::DOUBLE[], $2::DOUBLE[])", p, q)


def js(con, p, q):
    return one(con, "SELECT js_divergence($1::DOUBLE[], $2::DOUBLE[])", p, q)


def psi(con, a, e):
    return one(con, "SELECT population_stability_index($1::DOUBLE[], $2::DOUBLE[])", a, e)


def entropy(con, p):
    return one(con, "SELECT shannon_entropy($1::DOUBLE[])", p)


# ---------------------------------------------------------------- KL divergence


# D1: published worked example, Kullback (1959) Example 2.1 via Wikipedia "Kullback-Leibler
# divergence" (printed 0.0852996 and 0.097455 nats); full precision from scipy.
def test_d1_kullback_worked_example(con):
    forward, backward = kl(con, P_KULLBACK, UNIFORM3), kl(con, UNIFORM3, P_KULLBACK)
    assert forward == pytest.approx(0.0852996, abs=5e-8)  # as printed
    assert backward == pytest.approx(0.097455, abs=5e-7)  # as printed
    assert forward == pytest.approx(0.085299601318370568, rel=1e-12)
    assert backward == pytest.approx(0.097455006785387621, rel=1e-12)
    # scipy: stats.entropy, rel_entr(...).sum() and kl_div(...).sum() all agree
    assert forward == pytest.approx(stats.entropy(P_KULLBACK, UNIFORM3), rel=1e-12)
    assert forward == pytest.approx(special.rel_entr(P_KULLBACK, UNIFORM3).sum(), rel=1e-12)
    assert backward == pytest.approx(special.kl_div(UNIFORM3, P_KULLBACK).sum(), rel=1e-12)


# D2: Cover & Thomas (2006) Example 2.3.1 [printed 0.2075 / 0.1887 bits from memory].
def test_d2_cover_thomas_example_in_bits(con):
    assert kl(con, [0.5, 0.5], [0.75, 0.25]) / LN2 == pytest.approx(
        1 - 0.5 * math.log2(3), rel=1e-13
    )
    assert kl(con, [0.5, 0.5], [0.75, 0.25]) / LN2 == pytest.approx(0.20751874963942191, rel=1e-13)
    assert kl(con, [0.75, 0.25], [0.5, 0.5]) / LN2 == pytest.approx(0.18872187554086714, rel=1e-13)


# D3: scipy.stats.entropy docstring prints 0.7369655941662062 (the installed build gives ...061).
def test_d3_scipy_docstring_example(con):
    assert kl(con, [0.5, 0.5], [0.9, 0.1]) / LN2 == pytest.approx(0.7369655941662062, rel=1e-14)
    assert kl(con, [0.5, 0.5], [0.9, 0.1]) == pytest.approx(
        stats.entropy([0.5, 0.5], [0.9, 0.1]), rel=1e-14
    )


# D4: terms with p = 0 contribute 0; q = 0 < p gives +inf (scipy.special.rel_entr convention).
def test_d4_zero_probabilities(con):
    assert kl(con, [0.5, 0.5, 0.0], [0.25, 0.25, 0.5]) == pytest.approx(LN2, rel=1e-15)
    assert kl(con, [0.5, 0.5], [1.0, 0.0]) == math.inf
    assert special.rel_entr(0.0, 0.0) == 0.0 and special.rel_entr(0.5, 0.0) == math.inf


def test_kl_is_zero_for_equal_distributions_and_asymmetric_otherwise(con):
    assert kl(con, P_KULLBACK, P_KULLBACK) == 0.0
    assert kl(con, [1.0, 0.0], [1.0, 0.0]) == 0.0
    assert kl(con, P_KULLBACK, UNIFORM3) != kl(con, UNIFORM3, P_KULLBACK)


def test_kl_needs_distributions(con):
    # CONTRACT: inputs checked by as_distribution (no negatives, sum within 1e-3 of 1).
    assert kl(con, [1.0, 2.0, 3.0], [1.0, 2.0, 3.0]) is None
    assert kl(con, [0.5, 0.5], [1.5, -0.5]) is None
    assert kl(con, [0.5, float("nan")], [0.5, 0.5]) is None
    assert kl(con, [0.5, 0.5], None) is None


def test_kl_renormalises_within_tolerance(con):
    p = [0.3602, 0.48, 0.16]  # sums to 1.0002
    expected = special.rel_entr(np.array(p) / sum(p), UNIFORM3).sum()
    assert kl(con, p, UNIFORM3) == pytest.approx(expected, rel=1e-13)


def test_kl_with_a_tiny_but_positive_q_is_finite(con):
    # q_j = 1e-320 > 0 (subnormal): p_j / q_j overflows float64, but p_j log(p_j / q_j) is
    # only 0.0073; scipy.special.rel_entr and scipy.stats.entropy give the finite value.
    p, q = [1e-5, 1 - 1e-5], [1e-320, 1.0]
    expected = special.rel_entr(p, q).sum()
    assert math.isfinite(expected)
    assert kl(con, p, q) == pytest.approx(expected, rel=1e-9)
    assert kl(con, [1.0, 0.0], [5e-324, 1.0]) == pytest.approx(
        special.rel_entr(1.0, 5e-324), rel=1e-12
    )
    assert psi(con, p, q) == pytest.approx(expected + special.rel_entr(q, p).sum(), rel=1e-9)


@pytest.mark.parametrize(
    "q",
    [
        [0.2, 0.30000000000000004, 0.49999999999999994],
        [0.20000000000000004, 0.3, 0.49999999999999994],
    ],
)
def test_divergences_of_distributions_one_ulp_apart_are_tiny_and_never_negative(con, q):
    # Gibbs' inequality (Cover & Thomas 2006 [mem]): KL >= 0, hence JS >= 0 and PSI >= 0.
    # Rounding in sum p (log p - log q) must not push a ~1e-32 divergence below zero
    # (a negative JS also makes scipy's sqrt-based jensenshannon return nan).
    p = [0.2, 0.3, 0.5]
    for value in (kl(con, p, q), kl(con, q, p), js(con, p, q), psi(con, p, q)):
        assert 0.0 <= value <= 1e-15


# ---------------------------------------------------------------- Jensen-Shannon


# E1: scipy jensenshannon docstring, 0.46450140402245893 -- scipy returns the square root.
def test_e1_jensen_shannon_against_scipy_docstring(con):
    got = js(con, [1.0, 0.0], [0.5, 0.5])
    assert got == pytest.approx(0.46450140402245893**2, rel=1e-14)
    assert got == pytest.approx(jensenshannon([1.0, 0.0], [0.5, 0.5]) ** 2, rel=1e-14)
    # Lin (1991) [mem]: JSD = KL(P||M)/2 + KL(Q||M)/2, M = (P + Q)/2
    assert got == pytest.approx(
        0.5 * math.log(4 / 3) + 0.25 * math.log(2 / 3) + 0.25 * LN2, rel=1e-14
    )


# E2: disjoint supports reach the maximum ln 2 (= 1 bit; scipy jensenshannon base=2 gives 1.0).
def test_e2_disjoint_supports_give_ln2(con):
    assert js(con, [1.0, 0.0, 0.0], [0.0, 1.0, 0.0]) == pytest.approx(LN2, rel=1e-15)
    assert jensenshannon([1, 0, 0], [0, 1, 0], base=2) == pytest.approx(1.0, rel=1e-15)


def test_js_is_symmetric_bounded_and_finite_where_kl_is_not(con):
    p, q = [0.5, 0.5, 0.0], [0.0, 0.2, 0.8]
    assert js(con, p, q) == pytest.approx(js(con, q, p), rel=1e-15)
    assert 0 < js(con, p, q) < LN2
    assert kl(con, p, q) == math.inf
    assert js(con, p, p) == 0.0
    ref = jensenshannon(p, q) ** 2  # scipy, natural log
    assert js(con, p, q) == pytest.approx(ref, rel=1e-13)


def test_js_stays_within_0_ln2_for_subnormal_probabilities(con):
    # Lin (1991): 0 <= JSD <= ln 2 always; m = (p + q)/2 can underflow to 0 where q = 5e-324,
    # which must not turn into q log(q / 0) = +inf (scipy's jensenshannon gives inf here too).
    got = js(con, [1.0, 0.0], [1.0, 5e-324])
    assert got is not None and 0.0 <= got <= 1e-300


# ---------------------------------------------------------------- entropy


# F1: Shannon (1948): H(uniform K) = ln K; a certain outcome has H = 0 (perplexity 1).
@pytest.mark.parametrize("k", [2, 3, 10, 1000])
def test_f1_uniform_entropy_is_ln_k(con, implementation, k):
    assert entropy(con, [1 / k] * k) == pytest.approx(math.log(k), rel=1e-14)
    assert one(
        con, "SELECT softmax_entropy(list_transform(range($1), lambda x: -3.5))", k
    ) == pytest.approx(math.log(k), rel=1e-14)
    # perplexity = K; exp multiplies H's relative error by H = ln K, and the macros' sequential
    # sum of K terms keeps H to about 2e-14 relative at K = 1000
    rel = 1e-12 if implementation == "macros" else 1e-13
    assert math.exp(entropy(con, [1 / k] * k)) == pytest.approx(k, rel=rel)


def test_f1_certain_outcome_has_zero_entropy(con):
    assert entropy(con, [1.0, 0.0, 0.0]) == 0.0
    assert one(con, "SELECT softmax_entropy([0.0, '-inf'::DOUBLE, '-inf'::DOUBLE])") == 0.0
    assert one(con, "SELECT softmax_entropy([1e4, -1e4, 0.0])") == 0.0


# F2: scipy.stats.entropy docstring: entropy([0.9, 0.1], base=2) = 0.46899559358928117.
def test_f2_scipy_docstring_example(con):
    assert entropy(con, [0.9, 0.1]) / LN2 == pytest.approx(0.46899559358928117, rel=1e-14)
    assert entropy(con, [0.9, 0.1]) == pytest.approx(special.entr([0.9, 0.1]).sum(), rel=1e-14)


# F3: H(Kullback's P) = 1.0133126873497391 nats = 1.4619011889093373 bits; perplexity 2.7547...
def test_f3_entropy_of_kullback_distribution(con):
    h = entropy(con, P_KULLBACK)
    assert h == pytest.approx(1.0133126873497391, rel=1e-14)
    assert h / LN2 == pytest.approx(1.4619011889093373, rel=1e-14)
    assert math.exp(h) == pytest.approx(2.7547114143877865, rel=1e-14)


def test_softmax_entropy_matches_scipy_entr_of_softmax(con):
    rng = np.random.default_rng(4)
    z = rng.normal(0, 3, (300, 8))
    con.register(
        "t", pa.table({"i": np.arange(300), "z": pa.array(z.tolist(), pa.list_(pa.float64()))})
    )
    got = np.array(
        [r[0] for r in con.sql("SELECT softmax_entropy(z) FROM t ORDER BY i").fetchall()]
    )
    ref = special.entr(special.softmax(z, axis=1)).sum(axis=1)  # scipy.special entr / softmax
    assert np.allclose(got, ref, rtol=1e-12, atol=0)


def test_entropy_of_something_that_is_not_a_distribution_is_null(con):
    assert entropy(con, [0.5, 0.6]) is None
    assert entropy(con, [1.2, -0.2]) is None
    assert one(con, "SELECT softmax_entropy(['inf'::DOUBLE, 0.0])") is None


# ---------------------------------------------------------------- PSI (Jeffreys divergence)


# J1: Kullback's P against uniform: KL(a||e) + KL(e||a) = 0.18275460810375819.
def test_j1_psi_is_the_symmetrised_kl(con):
    got = psi(con, P_KULLBACK, UNIFORM3)
    assert got == pytest.approx(0.18275460810375819, rel=1e-13)
    assert got == pytest.approx(
        kl(con, P_KULLBACK, UNIFORM3) + kl(con, UNIFORM3, P_KULLBACK), rel=1e-14
    )
    ref = (
        special.rel_entr(P_KULLBACK, UNIFORM3).sum() + special.rel_entr(UNIFORM3, P_KULLBACK).sum()
    )
    assert got == pytest.approx(ref, rel=1e-13)


# J2: ten bins of 0.1 against a small shift: 0.02 ln 1.5 + 0.01 ln(11/9).
def test_j2_small_shift(con):
    a = [0.08, 0.09, 0.10, 0.11, 0.12] + [0.10] * 5
    got = psi(con, a, [0.1] * 10)
    assert got == pytest.approx(0.010116009116784799, rel=1e-12)
    assert got == pytest.approx(0.02 * math.log(1.5) + 0.01 * math.log(11 / 9), rel=1e-12)


# J3: a = [.05, .05, six x .1, .15, .15] against uniform: 0.1 ln 3.
def test_j3_symmetric_shift(con):
    assert psi(con, [0.05, 0.05] + [0.1] * 6 + [0.15, 0.15], [0.1] * 10) == pytest.approx(
        0.1 * LN3, rel=1e-12
    )


# J4: identical histograms give 0; a bin empty in only one histogram gives +inf (no smoothing;
# adding epsilon is common practice [RoT], left to the caller).
def test_j4_identical_and_one_sided_empty_bins(con):
    assert psi(con, [0.2, 0.3, 0.5], [0.2, 0.3, 0.5]) == 0.0
    assert psi(con, [0.0, 0.5, 0.5], [0.0, 0.5, 0.5]) == 0.0  # empty in both: contributes 0
    assert psi(con, [0.0, 0.5, 0.5], [0.2, 0.3, 0.5]) == math.inf
    assert psi(con, [0.2, 0.3, 0.5], [0.0, 0.5, 0.5]) == math.inf


def test_psi_accepts_counts_and_normalises_each_side(con):
    # CONTRACT: counts or proportions, each normalised. Same as J1 with counts.
    assert psi(con, [36, 48, 16], [7, 7, 7]) == pytest.approx(0.18275460810375819, rel=1e-13)
    assert psi(con, [0, 0, 0], [1, 1, 1]) is None  # no mass: undefined
    assert psi(con, [-1, 2, 3], [1, 1, 1]) is None  # negative count


# ---------------------------------------------------------------- as_distribution


def test_as_distribution_renormalises_within_1e_3_and_rejects_the_rest(con):
    got = one(con, "SELECT as_distribution([0.2, 0.8005])")
    assert got == pytest.approx([0.2 / 1.0005, 0.8005 / 1.0005], rel=1e-15)
    assert sum(got) == pytest.approx(1.0, rel=1e-15)
    assert one(con, "SELECT as_distribution([0.25, 0.25, 0.5])") == [0.25, 0.25, 0.5]
    assert one(con, "SELECT as_distribution([0.5, 0.6])") is None
    assert one(con, "SELECT as_distribution([1.1, -0.1])") is None
    assert one(con, "SELECT as_distribution([0.5, 'nan'::DOUBLE, 0.5])") is None
    assert one(con, "SELECT as_distribution(['inf'::DOUBLE, 0.0])") is None
