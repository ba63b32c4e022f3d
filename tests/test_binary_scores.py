"""The binary wrappers (dbmetrics/binary_scores.py): the SQL and numpy spellings of the pairs
and the macro pack's agree, and [0, s] is the logistic model (scipy.special.expit)."""

import duckdb
import numpy as np
import pytest
from scipy import special

from dbmetrics.binary_scores import BINARY_KINDS, pair, pair_sql
from dbmetrics.kernels.softmax import softmax
from dbmetrics.macros import load_macros

SCORES = [-np.inf, -30.0, -1.5, 0.0, 0.25, 1.0, 2.0, 40.0, np.inf, np.nan]


@pytest.mark.parametrize("kind", BINARY_KINDS)
def test_sql_numpy_and_macro_pairs_agree(kind):
    con = load_macros(duckdb.connect())
    con.register("t", {"s": np.array(SCORES)})
    macro = f"dbmetrics_{kind}_scores"
    sql, packed = zip(
        *con.sql(f"SELECT {pair_sql(kind, 's')}, {macro}(s) FROM t").fetchall(), strict=True
    )
    expected = pair(kind, np.array(SCORES))
    np.testing.assert_array_equal(np.array(sql, dtype=float), expected)
    np.testing.assert_array_equal(np.array(packed, dtype=float), expected)


def test_a_log_odds_pair_gives_the_logistic_probability():
    s = np.array([-30.0, -1.5, 0.0, 0.25, 2.0, 40.0])
    np.testing.assert_allclose(softmax(pair("binary_logit", s))[:, 1], special.expit(s), rtol=1e-15)
