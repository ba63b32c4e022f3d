"""Properties that must hold for any input (hypothesis), each example a batch of rows.

Mathematical facts checked (Cover & Thomas 2006 [mem] for Gibbs' inequality and the
CE = H + KL identity; Lin 1991 [mem] for 0 <= JS <= ln 2): softmax shift invariance,
softmax sums to 1, KL >= 0 with equality iff p = q, CE >= H, PSI = KL(a||e) + KL(e||a).
Floating-point slack is a few ulps, stated in each test.
"""

import math

import numpy as np
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import special

EPS = np.finfo(float).eps
EXAMPLES = settings(max_examples=100, deadline=None, derandomize=True)  # reproducible runs

finite_logit = st.floats(-1e4, 1e4, allow_nan=False)
logit = st.one_of(
    finite_logit, finite_logit, finite_logit, st.just(-math.inf), st.sampled_from([1e4, -1e4])
)
weight = st.one_of(st.floats(0, 1), st.just(0.0))


@st.composite
def logit_rows(draw, min_k=1):
    k = draw(st.integers(min_k, 12))
    rows = draw(
        st.lists(
            st.lists(logit, min_size=k, max_size=k).filter(lambda r: max(r) > -math.inf),
            min_size=1,
            max_size=25,
        )
    )
    return rows


@st.composite
def distributions(draw, k):
    w = np.array(draw(st.lists(weight, min_size=k, max_size=k).filter(lambda r: sum(r) > 1e-3)))
    return (w / w.sum()).tolist()


@st.composite
def distribution_pairs(draw):
    k = draw(st.integers(1, 10))
    return draw(st.lists(st.tuples(distributions(k), distributions(k)), min_size=1, max_size=25))


def run(con, sql, **columns):
    con.register(
        "t",
        pa.table(
            {
                "i": np.arange(len(next(iter(columns.values())))),
                **{
                    name: pa.array(v, pa.list_(pa.float64()))
                    if isinstance(v[0], list)
                    else pa.array(v)
                    for name, v in columns.items()
                },
            }
        ),
    )
    return con.sql(sql + " FROM t ORDER BY i").fetchall()


@EXAMPLES
@given(rows=logit_rows(), shift=st.floats(-1e3, 1e3))
def test_log_softmax_is_shift_invariant(module_con, rows, shift):
    shifted = [[v + shift for v in r] for r in rows]
    got = run(module_con, "SELECT log_softmax(a), log_softmax(b)", a=rows, b=shifted)
    for (a, b), r in zip(got, rows):
        scale = max(abs(v) for v in r if v > -math.inf) + abs(shift) + len(r)
        a, b = np.array(a), np.array(b)
        assert np.array_equal(np.isneginf(a), np.isneginf(b))
        finite = np.isfinite(a)
        assert np.allclose(a[finite], b[finite], rtol=0, atol=8 * EPS * scale)


@EXAMPLES
@given(rows=logit_rows())
def test_softmax_is_a_distribution_that_agrees_with_scipy(module_con, rows):
    for (p, lse), r in zip(run(module_con, "SELECT softmax(a), logsumexp(a)", a=rows), rows):
        p = np.array(p)
        assert ((p >= 0) & (p <= 1)).all()
        assert abs(p.sum() - 1) <= 4 * EPS * len(r)
        assert np.allclose(p, special.softmax(r), rtol=1e-12, atol=4 * EPS)  # scipy.special.softmax
        assert lse == pytest.approx(special.logsumexp(r), rel=1e-14, abs=4 * EPS * len(r))


@EXAMPLES
@given(pairs=distribution_pairs())
def test_kl_is_nonnegative_and_zero_only_for_equal_distributions(module_con, pairs):
    p, q = [a for a, _ in pairs], [b for _, b in pairs]
    got = run(
        module_con,
        "SELECT kl_divergence(p, q), kl_divergence(p, p), js_divergence(p, q), "
        "js_divergence(q, p), population_stability_index(p, q), kl_divergence(q, p)",
        p=p,
        q=q,
    )
    for (kl_pq, kl_pp, js_pq, js_qp, psi, kl_qp), a, b in zip(got, p, q):
        assert kl_pp == 0.0
        assert kl_pq >= 0.0  # Gibbs' inequality
        if kl_pq == 0.0:  # then p = q up to rounding of the ratios
            assert np.allclose(a, b, rtol=4 * EPS, atol=4 * EPS)
        ref = special.rel_entr(a, b).sum()  # scipy.special.rel_entr
        assert kl_pq == pytest.approx(ref, rel=1e-9, abs=1e-14) or kl_pq == ref == math.inf
        assert 0.0 <= js_pq <= math.log(2) * (1 + 4 * EPS)  # Lin (1991)
        assert js_pq == pytest.approx(js_qp, rel=1e-12, abs=1e-15)
        assert psi == pytest.approx(kl_pq + kl_qp, rel=1e-12, abs=1e-15) or psi == kl_pq + kl_qp


@EXAMPLES
@given(pairs=distribution_pairs())
def test_cross_entropy_is_entropy_plus_kl_and_never_below_entropy(module_con, pairs):
    target, pred = [a for a, _ in pairs], [b for _, b in pairs]
    got = run(
        module_con,
        "SELECT soft_cross_entropy_probs(q, t), shannon_entropy(t), kl_divergence(t, q), "
        "soft_cross_entropy(ln_q, t)",
        t=target,
        q=pred,
        ln_q=[[math.log(v) if v > 0 else -math.inf for v in b] for b in pred],
    )
    for ce, h, kl, ce_logits in got:
        assert ce >= h * (1 - 4 * EPS) - 4 * EPS
        if math.isinf(kl):
            assert ce == ce_logits == math.inf
        else:  # Cover & Thomas; scipy.stats.entropy doc
            assert ce == pytest.approx(h + kl, rel=1e-12, abs=1e-14)
            assert ce_logits == pytest.approx(ce, rel=1e-12, abs=1e-14)


@pytest.mark.slow
@EXAMPLES
@given(rows=logit_rows(), data=st.data())
def test_prediction_fields_are_consistent(module_con, rows, data):
    labels = [data.draw(st.integers(0, len(r) - 1)) for r in rows]
    got = run(
        module_con,
        "SELECT predicted_class(a), confidence(a), margin(a), brier_score(a, y), "
        "cross_entropy(a, y), softmax_entropy(a), logit_row_stats(a, y, 15)",
        a=rows,
        y=labels,
    )
    for (pred, conf, marg, brier, ce, h, s), r, y in zip(got, rows, labels):
        k = len(r)
        assert pred == int(np.argmax(r))  # numpy: first maximum
        assert conf >= 1 / k * (1 - 4 * EPS) and conf <= 1
        assert 0 <= marg <= conf
        assert 0 <= brier <= 2 + 4 * EPS  # Brier (1950) range
        assert ce >= 0 and -4 * EPS <= h <= math.log(k) * (1 + 4 * EPS)
        assert (s["predicted"], s["correct"], s["classes"]) == (pred, pred == y, k)
        assert s["loss"] == pytest.approx(ce, rel=1e-12, abs=4 * EPS) or s["loss"] == ce == math.inf
        assert s["confidence"] == pytest.approx(conf, rel=1e-13)
        assert s["entropy"] == pytest.approx(h, rel=1e-9, abs=1e-14)
        assert s["bin"] == int(
            np.searchsorted(np.linspace(0, 1, 16)[1:-1], s["confidence"], side="left")
        )


@EXAMPLES
@given(conf=st.lists(st.floats(0, 1), min_size=1, max_size=50), bins=st.integers(1, 40))
def test_calibration_bin_is_sklearns_right_closed_bin(module_con, conf, bins):
    got = [r[0] for r in run(module_con, f"SELECT calibration_bin(c, {bins})", c=conf)]
    edges = np.linspace(0, 1, bins + 1)  # sklearn.calibration.calibration_curve
    assert got == np.searchsorted(edges[1:-1], conf, side="left").tolist()
    for c, b in zip(conf, got):
        assert 0 <= b < bins
        assert edges[b] < c <= edges[b + 1] or (c == 0 and b == 0)
