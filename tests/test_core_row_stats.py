"""logit_row_stats / prob_row_stats: every per-row quantity at once, with issue codes.

Each field must equal the scalar SQL function of the same name and an outside
reference row by row: scipy.special log_softmax / softmax / entr, numpy argmax,
Brier (1950) sum, sklearn calibration_curve binning (searchsorted on linspace).
"""

import math

import numpy as np
import pyarrow as pa
import pytest
from scipy import special

NUMERIC = ("loss", "confidence", "predicted", "correct", "brier", "entropy", "bin")
LABELLED = ("loss", "correct", "brier")
INF, NAN = math.inf, math.nan


def stats(con, fn, scores, label, bins=10):
    return con.execute(
        f"SELECT {fn}($1::DOUBLE[], $2::BIGINT, $3)", [scores, label, bins]
    ).fetchall()[0][0]


# ---------------------------------------------------------------- issue codes


@pytest.mark.parametrize(
    "fn, scores, issue",
    [
        ("logit_row_stats", [1.0, 2.0], 0),
        ("logit_row_stats", [0.0, -INF], 0),  # one masked class is fine
        ("logit_row_stats", None, 1),
        ("logit_row_stats", [], 1),
        ("logit_row_stats", [NAN, 1.0], 2),
        ("logit_row_stats", [INF, 1.0], 2),
        ("logit_row_stats", [-INF, -INF], 2),
        ("prob_row_stats", [0.3, 0.7], 0),
        ("prob_row_stats", [0.3, 0.7005], 0),  # within 1e-3: renormalised
        ("prob_row_stats", None, 1),
        ("prob_row_stats", [], 1),
        ("prob_row_stats", [NAN, 0.5], 2),
        ("prob_row_stats", [INF, 0.0], 2),
        ("prob_row_stats", [1.2, -0.2], 3),
        ("prob_row_stats", [0.5, 0.6], 3),
    ],
)
def test_score_issue_codes(con, fn, scores, issue):
    # CONTRACT: 0 ok, 1 missing, 2 invalid (NaN, +inf, every class masked), 3 not a distribution.
    s = stats(con, fn, scores, 0)
    assert s["score_issue"] == issue
    if issue:
        assert all(s[f] is None for f in NUMERIC)
    else:
        assert all(s[f] is not None for f in NUMERIC)


@pytest.mark.parametrize("fn", ["logit_row_stats", "prob_row_stats"])
@pytest.mark.parametrize("label, issue", [(0, 0), (2, 0), (None, 1), (3, 2), (-1, 2), (10**12, 2)])
def test_label_issue_codes_never_raise(con, fn, label, issue):
    # CONTRACT: 0 in range, 1 NULL, 2 outside [0, K); only loss/correct/brier depend on the label.
    s = stats(con, fn, [0.2, 0.3, 0.5], label)
    assert s["label_issue"] == issue
    assert s["score_issue"] == 0 and s["classes"] == 3
    assert all((s[f] is None) == (issue != 0) for f in LABELLED)
    assert all(s[f] is not None for f in ("confidence", "predicted", "entropy", "bin"))


def test_missing_scores_have_no_class_count(con):
    assert stats(con, "logit_row_stats", None, 1)["classes"] is None
    assert stats(con, "logit_row_stats", None, None)["label_issue"] == 1


# ---------------------------------------------------------------- values


def test_masked_true_class_gives_infinite_loss(con):
    # -log 0 = +inf (torch.nn.functional.cross_entropy gives inf); rollups count such rows apart.
    s = stats(con, "logit_row_stats", [0.0, -INF, 0.0], 1)
    assert (
        s["loss"] == INF and s["brier"] == pytest.approx(1.5, rel=1e-15) and s["correct"] is False
    )
    assert stats(con, "prob_row_stats", [0.5, 0.0, 0.5], 1)["loss"] == INF


def test_extreme_logits(con):
    s = stats(con, "logit_row_stats", [1e4, -1e4, 0.0], 1, 15)
    assert (
        s["loss"],
        s["confidence"],
        s["predicted"],
        s["correct"],
        s["brier"],
        s["entropy"],
        s["bin"],
    ) == (20000.0, 1.0, 0, False, 2.0, 0.0, 14)


def test_b2_worked_example(con):
    # logits [1,2,3], label 2 (scipy.special.log_softmax); entropy of softmax by scipy.special.entr.
    s = stats(con, "logit_row_stats", [1.0, 2.0, 3.0], 2, 10)
    p = special.softmax([1.0, 2.0, 3.0])
    assert s["loss"] == pytest.approx(0.4076059644443803, rel=1e-14)
    assert s["confidence"] == pytest.approx(0.66524095577482189, rel=1e-14)
    assert s["entropy"] == pytest.approx(special.entr(p).sum(), rel=1e-13)
    assert s["brier"] == pytest.approx(((p - [0, 0, 1]) ** 2).sum(), rel=1e-13)
    assert (s["predicted"], s["correct"], s["bin"], s["classes"]) == (2, True, 6, 3)


def scalar_sql(kind):
    """The scalar functions each row-stats field must agree with."""
    if kind == "logit":
        return """cross_entropy(z, y), confidence(z), predicted_class(z), is_correct(z, y),
                  brier_score(z, y), softmax_entropy(z), calibration_bin(confidence(z), 15)"""
    return """cross_entropy_probs(z, y), confidence_probs(z), predicted_class(as_distribution(z)),
              is_correct(as_distribution(z), y), brier_score_probs(z, y), shannon_entropy(z),
              calibration_bin(confidence_probs(z), 15)"""


def mixed_rows(kind, n=3000, seed=8):
    """Ragged rows (K = 1..12), moderate and extreme values, masked classes, NULL labels."""
    rng = np.random.default_rng(seed)
    rows, labels = [], []
    for i in range(n):
        k = int(rng.integers(1, 13))
        z = rng.normal(0, rng.choice([0.5, 3, 30]), k)
        z[rng.random(k) < 0.05] = 1e4
        z[rng.random(k) < 0.08] = -np.inf
        if kind == "prob":
            z = special.softmax(z) if np.isfinite(z.max()) else z
        rows.append(z.tolist())
        labels.append(None if i % 37 == 0 else int(rng.integers(0, k)))
    return rows, labels


@pytest.mark.parametrize("kind", ["logit", "prob"])
def test_every_field_equals_its_scalar_function(con, kind):
    rows, labels = mixed_rows(kind)
    con.register(
        "t",
        pa.table(
            {
                "i": np.arange(len(rows)),
                "z": pa.array(rows, pa.list_(pa.float64())),
                "y": pa.array(labels, pa.int64()),
            }
        ),
    )
    got = con.sql(
        f"SELECT {kind}_row_stats(z, y, 15) AS s, {scalar_sql(kind)} FROM t ORDER BY i"
    ).fetchall()
    for r in got:
        s, scalar = r[0], dict(zip(NUMERIC, r[1:]))
        if s["label_issue"] == 1:
            for f in LABELLED:
                scalar[f] = None
        for f in NUMERIC:
            a, b = s[f], scalar[f]
            if isinstance(a, float) and isinstance(b, float):
                assert a == pytest.approx(b, rel=1e-9, abs=1e-15), (f, s, scalar)
            else:
                assert a == b, (f, s, scalar)


@pytest.mark.parametrize("k", [3, 40])  # both sides of the short-row loop (32 classes)
def test_logit_fields_match_scipy_row_by_row(con, k):
    rng = np.random.default_rng(k)
    n = 2500
    z = rng.normal(0, 4, (n, k))
    z[rng.random((n, k)) < 0.05] = -np.inf
    z[0] = -np.inf  # every class masked: invalid row
    y = rng.integers(0, k, n)
    con.register(
        "t", pa.table({"i": np.arange(n), "z": pa.array(list(z), pa.list_(pa.float64())), "y": y})
    )
    got = [r[0] for r in con.sql("SELECT logit_row_stats(z, y, 10) FROM t ORDER BY i").fetchall()]
    ok = np.isfinite(z.max(axis=1))
    with np.errstate(invalid="ignore"):
        logp = special.log_softmax(z, axis=1)  # scipy.special.log_softmax
    p = np.exp(logp)
    col = {f: np.array([g[f] if g[f] is not None else np.nan for g in got], float) for f in NUMERIC}
    assert [g["score_issue"] for g in got] == np.where(ok, 0, 2).tolist()
    assert np.isnan(col["loss"][~ok]).all()
    ref = {
        "loss": -logp[np.arange(n), y],
        "confidence": p.max(axis=1),
        "predicted": np.argmax(z, axis=1),
        "correct": np.argmax(z, axis=1) == y,
        "brier": ((p - np.eye(k)[y]) ** 2).sum(axis=1),  # Brier (1950)
        "entropy": special.entr(p).sum(axis=1),  # scipy.special.entr
        "bin": np.searchsorted(np.linspace(0, 1, 11)[1:-1], p.max(axis=1), side="left"),
    }
    for f, r in ref.items():
        assert np.allclose(col[f][ok], r[ok], rtol=1e-9, atol=1e-15), f
    assert (col["loss"][ok] == np.inf).sum() == np.isneginf(logp[np.arange(n), y][ok]).sum() > 0


def test_prob_fields_match_numpy_row_by_row(con):
    rng = np.random.default_rng(9)
    n, k = 2500, 5
    p = rng.dirichlet(np.full(k, 0.7), n)
    p[rng.random((n, k)) < 0.03] = 0.0
    p /= p.sum(axis=1, keepdims=True)
    y = rng.integers(0, k, n)
    con.register(
        "t", pa.table({"i": np.arange(n), "p": pa.array(list(p), pa.list_(pa.float64())), "y": y})
    )
    got = [r[0] for r in con.sql("SELECT prob_row_stats(p, y, 10) FROM t ORDER BY i").fetchall()]
    col = {f: np.array([g[f] for g in got], float) for f in NUMERIC}
    with np.errstate(divide="ignore"):
        loss = -np.log(p[np.arange(n), y])
    assert np.allclose(col["loss"], loss, rtol=1e-12, atol=0)
    assert np.array_equal(col["predicted"], np.argmax(p, axis=1))
    assert np.allclose(col["confidence"], p.max(axis=1), rtol=1e-14, atol=0)
    assert np.allclose(col["brier"], ((p - np.eye(k)[y]) ** 2).sum(axis=1), rtol=1e-12, atol=1e-16)
    assert np.allclose(col["entropy"], special.entr(p).sum(axis=1), rtol=1e-12, atol=0)
    assert np.array_equal(
        col["bin"], np.searchsorted(np.linspace(0, 1, 11)[1:-1], p.max(axis=1), side="left")
    )


# ---------------------------------------------------------------- bins argument


def test_bins_must_be_one_positive_integer(con):
    with pytest.raises(Exception, match="bins must be one whole number in 1..1000000"):
        stats(con, "logit_row_stats", [1.0, 2.0], 0, 0)
    with pytest.raises(Exception, match="bins must be one whole number in 1..1000000"):
        stats(con, "logit_row_stats", [1.0, 2.0], 0, None)
