"""log_softmax, softmax, logsumexp: stable for any logits, -inf = masked class.

Outside references: scipy.special.log_softmax / softmax / logsumexp (installed source
read), torch.log_softmax, mpmath at 50 digits for the A1 constants (from memory of an
mpmath run; scipy recomputes each in the test).
"""

import math

import numpy as np
import pytest
from scipy import special

LN2, LN3 = math.log(2), math.log(3)


def one(con, sql):
    return con.sql(sql).fetchall()[0][0]


def row(con, fn, logits):
    """fn applied to one DOUBLE[] literal; 'inf' strings become IEEE values."""
    items = ", ".join(f"'{v}'::DOUBLE" for v in logits)
    return one(con, f"SELECT {fn}([{items}])")


# A1: logits [1, 2, 3]; expected values from scipy.special and mpmath (mpmath, 50 digits).
def test_a1_logsumexp_log_softmax_softmax_of_1_2_3(con):
    z = [1.0, 2.0, 3.0]
    assert row(con, "logsumexp", z) == pytest.approx(3.4076059644443803045, rel=1e-12)
    assert row(con, "logsumexp", z) == pytest.approx(special.logsumexp(z), rel=1e-12)
    assert row(con, "log_softmax", z) == pytest.approx(
        [-2.4076059644443803, -1.4076059644443803, -0.40760596444438030], rel=1e-12
    )
    assert row(con, "log_softmax", z) == pytest.approx(special.log_softmax(z).tolist(), rel=1e-12)
    assert row(con, "softmax", z) == pytest.approx(
        [0.090030573170380458, 0.24472847105479765, 0.66524095577482189], rel=1e-12
    )
    assert row(con, "softmax", z) == pytest.approx(special.softmax(z).tolist(), rel=1e-12)


# A2: shift invariance, [1001, 1002, 1003] gives A1 (scipy.special.log_softmax agrees).
def test_a2_shift_by_1000_changes_nothing(con):
    assert row(con, "log_softmax", [1001.0, 1002.0, 1003.0]) == pytest.approx(
        row(con, "log_softmax", [1.0, 2.0, 3.0]), rel=1e-12
    )
    assert row(con, "logsumexp", [1001.0, 1002.0, 1003.0]) == pytest.approx(
        1000 + 3.4076059644443803045, rel=1e-15
    )


# A3: [1e4, -1e4, 0] -- the naive exp/sum overflows to nan; scipy and torch give exact values.
def test_a3_extreme_logits_are_exact_where_the_naive_formula_overflows(con):
    z = [1e4, -1e4, 0.0]
    with np.errstate(over="ignore", invalid="ignore"):
        naive = np.exp(z) / np.exp(z).sum()
    assert np.isnan(naive[0])
    assert row(con, "log_softmax", z) == [0.0, -20000.0, -10000.0]
    assert special.log_softmax(z).tolist() == [0.0, -20000.0, -10000.0]
    assert row(con, "softmax", z) == [1.0, 0.0, 0.0]
    assert row(con, "logsumexp", z) == 1e4


# A4: ties at the extremes: [1e4, 1e4] -> -ln 2 each; [-1e4] x 3 -> -ln 3 each (scipy, torch).
def test_a4_tied_extremes(con):
    assert row(con, "log_softmax", [1e4, 1e4]) == pytest.approx([-LN2, -LN2], rel=1e-15)
    assert row(con, "log_softmax", [-1e4] * 3) == pytest.approx([-LN3] * 3, rel=1e-15)
    assert row(con, "logsumexp", [-1e4] * 3) == pytest.approx(-1e4 + LN3, rel=1e-15)


# A5: a -inf logit is a masked class: probability 0, log-probability -inf (scipy, torch).
def test_a5_minus_inf_masks_a_class(con):
    assert row(con, "log_softmax", [0.0, "-inf", 0.0]) == [-LN2, -math.inf, -LN2]
    assert row(con, "softmax", [0.0, "-inf", 0.0]) == [0.5, 0.0, 0.5]
    assert row(con, "logsumexp", [0.0, "-inf", 0.0]) == pytest.approx(LN2, rel=1e-15)
    assert special.softmax([0.0, -np.inf, 0.0]).tolist() == [0.5, 0.0, 0.5]


# A6: scipy and torch give nan for these; dbmetrics picks SQL NULL (CONTRACT: NaN -> NULL).
@pytest.mark.parametrize("logits", [["-inf", "-inf"], ["inf", 0.0], ["nan", 0.0], ["-inf"]])
@pytest.mark.parametrize("fn", ["log_softmax", "softmax", "logsumexp"])
def test_a6_undefined_rows_are_null(con, fn, logits):
    assert row(con, fn, logits) is None


def test_single_class_is_certain(con):
    # Definition: softmax of one logit is [1]; log_softmax is [0] (scipy.special agrees).
    assert row(con, "softmax", [-7.5]) == [1.0]
    assert row(con, "log_softmax", [123.0]) == [0.0]
    assert row(con, "logsumexp", [123.0]) == 123.0


def test_exp_of_log_softmax_is_softmax_and_rows_sum_to_one(con):
    rng = np.random.default_rng(1)
    z = rng.normal(0, 20, (300, 7))
    con.execute("CREATE TABLE t AS SELECT * FROM (SELECT unnest($1) AS z)", [z.tolist()])
    got = con.sql("SELECT softmax(z), log_softmax(z), logsumexp(z) FROM t").fetchall()
    p = np.array([r[0] for r in got])
    logp = np.array([r[1] for r in got])
    lse = np.array([r[2] for r in got])
    assert np.allclose(p.sum(axis=1), 1.0, rtol=0, atol=1e-15)
    assert np.allclose(np.exp(logp), p, rtol=1e-14, atol=0)
    # scipy.special references, float64
    assert np.allclose(p, special.softmax(z, axis=1), rtol=1e-12, atol=1e-300)
    assert np.allclose(logp, special.log_softmax(z, axis=1), rtol=1e-12)
    assert np.allclose(lse, special.logsumexp(z, axis=1), rtol=1e-14)


def test_float32_logits_are_computed_in_float64(con):
    # FLOAT[] values widen exactly to double; the reference is scipy on the widened values.
    z32 = np.array([0.1, 0.2, 0.7], np.float32)
    got = one(con, "SELECT log_softmax([0.1, 0.2, 0.7]::FLOAT[])")
    assert got == pytest.approx(special.log_softmax(z32.astype(np.float64)).tolist(), rel=1e-14)


@pytest.mark.parametrize("k", [2, 3, 7, 8, 9, 16, 100, 129, 1000])
def test_logits_give_scipys_bits_exactly(con, implementation, k):
    # scipy.special.log_softmax: the same operations in the same order, so tiny losses
    # (where log(1 + x) keeps only ~1e-16 absolute accuracy) agree to the last bit too.
    # The macros sum in DuckDB's order, so log(sum(exp(d))) differs by rounding (about
    # 1e-16 * sqrt(K) absolute): 1e-12 relative, and 1e-14 absolute for log-probabilities
    # near 0 where z_j - logsumexp(z) cancels.
    rng = np.random.default_rng(k)
    z = rng.normal(size=(300, k)) * 8
    y = rng.integers(0, k, 300)
    got = con.sql(
        "SELECT cross_entropy(z, y), log_softmax(z), logit_row_stats(z, y, 15).loss "
        "FROM (SELECT unnest($z) AS z, unnest($y) AS y)",
        params={"z": z.tolist(), "y": y.tolist()},
    ).fetchall()
    ref = special.log_softmax(z, axis=1)
    columns = [[r[i] for r in got] for i in range(3)]
    want = [(-ref[np.arange(300), y]).tolist(), ref.tolist(), (-ref[np.arange(300), y]).tolist()]
    if implementation == "macros":
        for column, expected in zip(columns, want):
            np.testing.assert_allclose(np.array(column), expected, rtol=1e-12, atol=1e-14)
    else:
        assert columns == want
