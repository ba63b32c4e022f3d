"""Input rules shared by every function: NULLs, bad values, bad labels, column types,
ragged rows, DuckDB batch boundaries, registration.

References: the CONTRACT input rules; values against scipy.special.log_softmax.
"""

import math

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import special

import dbmetrics

NULL_LIST, EMPTY_LIST = "NULL::DOUBLE[]", "[]::DOUBLE[]"

# The lists below come from the function catalogue's tags (dbmetrics.functions.TAGS): every
# function that takes a list is called with {a} (and {b}) standing for its list arguments; an
# unused list argument gets a valid distribution of 3 classes.
FILL = {"temperatures": "[1.0, 2.0]", "kind": "'logits'"}


def call_template(fn, label: str = "0") -> str:
    lists = iter(("{a}", "{b}"))
    args = [label if a == "label" else FILL.get(a) or next(lists) for a in fn.args]
    return f"{fn.name}({', '.join(args)})"


def tagged(*tags, without=("binary", "row_stats")):
    return [
        f
        for f in dbmetrics.FUNCTIONS
        if any(t in f.takes for t in tags) and not any(t in f.takes for t in without)
    ]


LIST_CALLS = {f.name: call_template(f) for f in tagged("logits", "probs")}
TWO_LISTS = tuple(f.name for f in tagged("two_lists"))
LOGIT_FUNCTIONS = tuple(f.name for f in tagged("logits"))
SCALAR_CALLS = {f.name for f in dbmetrics.FUNCTIONS} - set(LIST_CALLS)
LABELLED = {f.name: call_template(f, "{y}") for f in tagged("label")}
VALID = "[0.2, 0.3, 0.5]"


def one(con, sql, *params):
    return con.execute(sql, list(params)).fetchall()[0][0]


def calls(fn, bad):
    """The function with `bad` in each list position in turn."""
    yield LIST_CALLS[fn].format(a=bad, b=VALID)
    if fn in TWO_LISTS:
        yield LIST_CALLS[fn].format(a=VALID, b=bad)


def test_the_tags_give_the_lists_the_input_rules_were_written_for():
    # Each tag family checked against the functions it must hold (a new function joins by
    # its tags alone; these pin that the tags of today's functions are right).
    assert set(SCALAR_CALLS) == {
        "binary_cross_entropy",
        "binary_cross_entropy_prob",
        "binary_brier_score",
        "calibration_bin",
        "normal_sf",
        "logit_row_stats",
        "prob_row_stats",
    }
    assert set(TWO_LISTS) == {
        "soft_cross_entropy",
        "soft_cross_entropy_probs",
        "kl_divergence",
        "js_divergence",
        "population_stability_index",
    }
    assert set(LABELLED) == {
        "cross_entropy",
        "cross_entropy_probs",
        "is_correct",
        "brier_score",
        "brier_score_probs",
    }
    assert LIST_CALLS["temperature_scaled_losses"] == (
        "temperature_scaled_losses({a}, 0, [1.0, 2.0], 'logits')"
    )
    assert LIST_CALLS["kl_divergence"] == "kl_divergence({a}, {b})"
    assert len(LOGIT_FUNCTIONS) == 12 and "margin_probs" not in LOGIT_FUNCTIONS


# ---------------------------------------------------------------- NULL, empty, NaN, inf


@pytest.mark.parametrize("fn", sorted(LIST_CALLS))
def test_null_empty_or_nan_scores_give_null(module_con, fn):
    for bad in (NULL_LIST, EMPTY_LIST, "[0.5, 'nan'::DOUBLE, 0.5]", "[0.5, NULL, 0.5]"):
        for call in calls(fn, bad):
            assert one(module_con, f"SELECT {call}") is None, call


@pytest.mark.parametrize("fn", sorted(LABELLED))
def test_null_label_gives_null(con, fn):
    assert one(con, "SELECT " + LABELLED[fn].format(a=VALID, y="NULL")) is None


@pytest.mark.parametrize("fn", LOGIT_FUNCTIONS)
def test_plus_inf_or_every_class_masked_gives_null(module_con, fn):
    # CONTRACT: +inf logit -> NULL; all -inf -> NULL (scipy and torch give nan, §1 A6).
    for bad in ("[1.0, 'inf'::DOUBLE, 0.0]", "['-inf'::DOUBLE, '-inf'::DOUBLE, '-inf'::DOUBLE]"):
        for call in calls(fn, bad):
            assert one(module_con, f"SELECT {call}") is None, call


def test_minus_inf_logit_is_a_masked_class(con):
    assert one(con, "SELECT softmax([0.0, '-inf'::DOUBLE, 0.0])") == [0.5, 0.0, 0.5]
    assert one(con, "SELECT cross_entropy([0.0, '-inf'::DOUBLE, 0.0], 1)") == float("inf")
    assert one(con, "SELECT predicted_class(['-inf'::DOUBLE, -5.0, '-inf'::DOUBLE])") == 1


ZERO_CALLS = [
    "cross_entropy_probs([1.0, 0.0], 0)",
    "binary_cross_entropy_prob(1.0, 1)",
    "binary_cross_entropy_prob(0.0, 0)",
    "soft_cross_entropy_probs([1.0, 0.0], [1.0, 0.0])",
    "soft_cross_entropy([0.0, '-inf'::DOUBLE], [1.0, 0.0])",
    "shannon_entropy([1.0, 0.0])",
    "softmax_entropy([0.0, '-inf'::DOUBLE])",
    "softmax_entropy([1e4, 0.0])",
    "cross_entropy([1e4, 0.0], 0)",
    "prob_row_stats([1.0, 0.0], 0, 10).loss",
    "logit_row_stats([0.0, '-inf'::DOUBLE], 0, 10).entropy",
    "kl_divergence([1.0, 0.0], [1.0, 0.0])",
]


@pytest.mark.parametrize("call", ZERO_CALLS)
def test_a_zero_loss_or_entropy_is_plus_zero(module_con, call):
    # A certain, correct prediction costs exactly 0; -0.0 would print as "-0.0" in results.
    value = one(module_con, f"SELECT {call}")
    assert value == 0.0 and math.copysign(1.0, value) == 1.0


# ---------------------------------------------------------------- structural errors


@pytest.mark.parametrize("fn", TWO_LISTS)
def test_class_count_mismatch_is_an_error_naming_the_function_and_both_lengths(con, fn):
    with pytest.raises(duckdb.Error, match=rf"{fn}: .*\b3 classes\b.*\b2\b"):
        one(con, f"SELECT {fn}([0.2, 0.3, 0.5], [0.5, 0.5])")


def test_class_count_mismatch_in_a_later_row_is_found(con):
    con.execute("CREATE TABLE t AS SELECT [0.5, 0.5] AS p, [0.5, 0.5] AS q FROM range(3000)")
    con.execute("INSERT INTO t VALUES ([0.2, 0.3, 0.5], [0.5, 0.5])")
    with pytest.raises(duckdb.Error, match=r"kl_divergence: .*3.*2"):
        con.sql("SELECT sum(kl_divergence(p, q)) FROM t").fetchall()


@pytest.mark.parametrize("fn", sorted(LABELLED))
def test_label_outside_0_k_is_an_error_naming_the_bad_value(module_con, fn):
    for label in (3, -1, 1000):
        with pytest.raises(duckdb.Error, match=rf"{fn}: label {label} is outside \[0, 3\)"):
            one(module_con, "SELECT " + LABELLED[fn].format(a=VALID, y=label))


@pytest.mark.parametrize(
    "fn", ["binary_cross_entropy", "binary_cross_entropy_prob", "binary_brier_score"]
)
@pytest.mark.parametrize("label", [2, -1])
def test_binary_label_must_be_0_or_1(con, fn, label):
    with pytest.raises(duckdb.Error, match=rf"{fn}: label {label} is not 0 or 1"):
        one(con, f"SELECT {fn}(0.5, {label})")


def test_label_is_not_checked_where_scores_are_null(con):
    assert one(con, "SELECT cross_entropy(NULL::DOUBLE[], 99)") is None


# ---------------------------------------------------------------- column types


@pytest.mark.parametrize("scores_type", ["FLOAT[]", "DOUBLE[]", "FLOAT[3]", "DOUBLE[3]"])
@pytest.mark.parametrize("label_type", ["TINYINT", "SMALLINT", "INTEGER", "BIGINT", "UTINYINT"])
def test_score_and_label_column_types(con, scores_type, label_type):
    con.execute(f"CREATE TABLE t (z {scores_type}, y {label_type})")
    con.execute("INSERT INTO t VALUES ([0.5, 1.5, -2.0], 1), (NULL, 0), ([1.0, 2.0, 3.0], NULL)")
    got = con.sql(
        "SELECT cross_entropy(z, y), log_softmax(z), logit_row_stats(z, y, 10).loss FROM t"
    ).fetchall()
    z = np.array([0.5, 1.5, -2.0], np.float32 if "FLOAT" in scores_type else np.float64).astype(
        np.float64
    )
    ref = special.log_softmax(z)  # scipy.special.log_softmax
    assert got[0][0] == pytest.approx(-ref[1], rel=1e-14)
    assert got[0][1] == pytest.approx(ref.tolist(), rel=1e-14)
    assert got[0][2] == pytest.approx(-ref[1], rel=1e-12)
    assert got[1] == (None, None, None)
    assert got[2][0] is None and got[2][1] is not None and got[2][2] is None


def test_parquet_list_of_float_column(con, tmp_path):
    rng = np.random.default_rng(10)
    z = rng.normal(0, 3, (3000, 4)).astype(np.float32)
    y = rng.integers(0, 4, 3000).astype(np.int32)
    path = tmp_path / "log.parquet"
    pq.write_table(
        pa.table({"i": np.arange(3000), "z": pa.array(list(z), pa.list_(pa.float32())), "y": y}),
        path,
    )
    got = [
        r[0]
        for r in con.execute(
            "SELECT cross_entropy(z, y) FROM read_parquet(?) ORDER BY i", [str(path)]
        ).fetchall()
    ]
    ref = -special.log_softmax(z.astype(np.float64), axis=1)[np.arange(3000), y]
    assert np.allclose(got, ref, rtol=1e-12, atol=0)


# ---------------------------------------------------------------- ragged rows and batches


def ragged_table(rows, labels):
    return pa.table(
        {
            "i": np.arange(len(rows)),
            "z": pa.array(rows, pa.list_(pa.float64())),
            "y": pa.array(labels, pa.int64()),
        }
    )


PER_ROW_SQL = """SELECT cross_entropy(z, y), log_softmax(z), softmax(z), logsumexp(z), softmax_entropy(z),
                        confidence(z), predicted_class(z), brier_score(z, y), logit_row_stats(z, y, 10).loss
                 FROM t ORDER BY i"""


def per_row_reference(z, y):
    """scipy.special on the row's own K: the values PER_ROW_SQL must give."""
    z = np.asarray(z, float)
    logp = special.log_softmax(z)
    p = special.softmax(z)
    return (
        -logp[y],
        logp.tolist(),
        p.tolist(),
        special.logsumexp(z),
        special.entr(p).sum(),
        p.max(),
        int(np.argmax(z)),
        ((p - np.eye(len(z))[y]) ** 2).sum(),
        -logp[y],
    )


def assert_rows_match(got, expected):
    for g, e in zip(got, expected):
        for a, b in zip(g, e):
            assert a == pytest.approx(b, rel=1e-12, abs=1e-15)


def test_ragged_rows_agree_with_per_row_references(con):
    rng = np.random.default_rng(11)
    rows = [rng.normal(0, 4, int(rng.integers(1, 20))).tolist() for _ in range(2100)]
    labels = [int(rng.integers(0, len(r))) for r in rows]
    con.register("t", ragged_table(rows, labels))
    assert_rows_match(
        con.sql(PER_ROW_SQL).fetchall(), [per_row_reference(z, y) for z, y in zip(rows, labels)]
    )


def test_uniform_path_with_nulls_path_and_ragged_path_agree(con):
    rng = np.random.default_rng(12)
    rows = rng.normal(0, 4, (500, 5)).tolist()
    labels = rng.integers(0, 5, 500).tolist()
    con.register("t", ragged_table(rows, labels))  # every row K = 5: zero-copy path
    uniform = con.sql(PER_ROW_SQL).fetchall()
    with_nulls = [x for r in rows for x in (r, None)]  # uniform K, NULL rows between
    con.register("t", ragged_table(with_nulls, [y for y in labels for _ in (0, 1)]))
    nulls = con.sql(PER_ROW_SQL).fetchall()
    mixed = [x for r in rows for x in (r, [0.0, 1.0, 2.0])]  # K = 5 and K = 3 interleaved
    con.register("t", ragged_table(mixed, [x for y in labels for x in (y, 2)]))
    ragged = con.sql(PER_ROW_SQL).fetchall()
    assert nulls[1::2] == [(None,) * 9] * 500
    assert nulls[0::2] == uniform
    assert_rows_match(ragged[0::2], uniform)
    assert_rows_match(uniform, [per_row_reference(z, y) for z, y in zip(rows, labels)])


@pytest.mark.parametrize("n", [1, 2, 2047, 2048, 2049, 5000])
def test_batch_sizes_and_nulls_across_vector_boundaries(con, n):
    rng = np.random.default_rng(n)
    z = rng.normal(0, 5, (n, 4))
    y = rng.integers(0, 4, n)
    null_rows = (
        {i for i in (0, 1, 2046, 2047, 2048, 2049, 4095, 4096, n - 1) if i < n} if n > 2 else set()
    )
    null_labels = {i for i in range(7, n, 331)} | ({2047} if n > 2047 else set())
    rows = [None if i in null_rows else z[i].tolist() for i in range(n)]
    labels = [None if i in null_labels else int(y[i]) for i in range(n)]
    con.register("t", ragged_table(rows, labels))
    got = con.sql(
        "SELECT cross_entropy(z, y), logsumexp(z), logit_row_stats(z, y, 10).loss, "
        "log_softmax(z) FROM t ORDER BY i"
    ).fetchall()
    logp = special.log_softmax(z, axis=1)  # scipy.special.log_softmax
    lse = special.logsumexp(z, axis=1)
    for i, (ce, lsum, loss, ls) in enumerate(got):
        if i in null_rows:
            assert (ce, lsum, loss, ls) == (None, None, None, None)
            continue
        assert lsum == pytest.approx(lse[i], rel=1e-14)
        assert ls == pytest.approx(logp[i].tolist(), rel=1e-13)
        if i in null_labels:
            assert ce is None and loss is None
        else:
            assert ce == pytest.approx(-logp[i, y[i]], rel=1e-12)
            assert loss == pytest.approx(-logp[i, y[i]], rel=1e-12)


def test_filtered_and_sliced_rows(con):
    rng = np.random.default_rng(13)
    z = rng.normal(0, 3, (6000, 3))
    con.register("t", ragged_table(z.tolist(), [0] * 6000))
    got = con.sql(
        "SELECT i, logsumexp(z) FROM t WHERE i % 3 = 1 ORDER BY i LIMIT 1200 OFFSET 700"
    ).fetchall()
    assert [g[0] for g in got] == list(range(2101, 2101 + 3 * 1200, 3))
    assert np.allclose(
        [g[1] for g in got], special.logsumexp(z[[g[0] for g in got]], axis=1), rtol=1e-14
    )


def test_constant_and_literal_arguments(con):
    got = con.sql("SELECT cross_entropy([1.0, 2.0, 3.0], 2) FROM range(5000)").fetchall()
    assert len(got) == 5000
    assert all(g[0] == pytest.approx(0.4076059644443803, rel=1e-14) for g in got)


# ---------------------------------------------------------------- registration


def test_register_twice_is_harmless(con):
    assert dbmetrics.register(con) is con
    dbmetrics.register(con)
    assert one(con, "SELECT cross_entropy([1.0, 2.0, 3.0], 2)") == pytest.approx(
        0.4076059644443803, rel=1e-14
    )
    assert one(con.cursor(), "SELECT logsumexp([0.0, 0.0])") == pytest.approx(np.log(2), rel=1e-15)


def test_register_on_a_plain_connection_and_connect_config():
    plain = duckdb.connect()
    assert dbmetrics.register(plain) is plain
    assert one(plain, "SELECT softmax([0.0, 0.0])") == [0.5, 0.5]
    configured = dbmetrics.connect(threads=1)
    assert one(configured, "SELECT current_setting('threads')") == 1
    assert one(configured, "SELECT softmax([0.0, 0.0])") == [0.5, 0.5]


def test_no_registered_name_shadows_a_duckdb_builtin():
    builtins = {
        r[0]
        for r in duckdb.connect()
        .sql("SELECT DISTINCT function_name FROM duckdb_functions()")
        .fetchall()
    }
    assert not {f.name for f in dbmetrics.FUNCTIONS} & builtins
