"""Acceptance on generated prediction logs: every function against scipy / numpy float64.

Thousands of rows per K in (2, 3, 10, 1000) and one ragged column mixing those K.
Logits are normal at three scales with +/-1e4 and -inf (masked) entries, plus rows
that are NULL, empty, all -inf, or hold NaN / +inf; labels and targets have NULLs;
probability rows include ones that are not distributions. Every value must agree
with the reference to rel 1e-9, NULL exactly where the reference is undefined, and
+/-inf exactly where the reference is infinite.

Absolute floor ATOL = 8 ulp(1): a loss, log-probability or entropy near 0 is computed
from s = 1 + tiny, and scipy and dbmetrics both carry an absolute error of a few ulp(1)
there (2 ulp observed), so relative agreement is only meaningful above ~1e-6.
(Accuracy at that end is pinned in test_core_losses.py against scipy.special.log_expit.)

References: scipy.special log_softmax / softmax / logsumexp / rel_entr / entr / xlogy,
numpy argmax / searchsorted (sklearn calibration_curve binning), Brier (1950) sum;
scipy.stats.norm.sf for normal_sf.
"""

from functools import cache

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pytest
from scipy import special, stats

KS = (2, 3, 10, 1000, "mixed")
EPS = np.finfo(float).eps
RTOL, ATOL = 1e-9, 8 * EPS


# ---------------------------------------------------------------- generated logs


def random_logits(rng, n, k):
    z = rng.normal(0, 1, (n, k)) * rng.choice([0.3, 3.0, 30.0], (n, 1))
    u = rng.random((n, k))
    z[u < 0.01] = 1e4
    z[(u >= 0.01) & (u < 0.02)] = -1e4
    z[(u >= 0.02) & (u < 0.06)] = -np.inf
    return z


def random_distributions(rng, n, k):
    t = rng.dirichlet(np.full(k, 0.5), n)
    t[rng.random((n, k)) < 0.2] = 0.0
    empty = np.flatnonzero(t.sum(axis=1) == 0)
    t[empty, rng.integers(k, size=len(empty))] = 1.0
    return t / t.sum(axis=1, keepdims=True)


def softmax_where_defined(rng, z):
    """scipy softmax of the defined rows, a random distribution for the others."""
    out = random_distributions(rng, *z.shape)
    ok = defined_logits(z)
    out[ok] = special.softmax(z[ok], axis=1)
    return out


@cache
def logs(k):
    """Columns z (logits), y (label), t (soft target), p and q (probabilities), as row lists.

    Special rows by i % 250: 3 every class masked, 5 a NaN (logits and probabilities),
    7 a +inf logit, 11 empty lists, 13 probabilities summing to 1.01, 17 a negative
    probability, 19 probabilities summing to 1 + 5e-4 (renormalised). NULL rows every
    97th (scores), 101st (q), 113th (target); NULL labels every 89th.
    """
    rng = np.random.default_rng(7 if k == "mixed" else k)
    n = 2100 if k == 1000 else (3000 if k == "mixed" else 4500)
    ks = rng.choice([2, 3, 10, 1000], n, p=[0.3, 0.3, 0.3, 0.1]) if k == "mixed" else np.full(n, k)
    cols = {c: [None] * n for c in "zytpq"}
    for kg in np.unique(ks):
        idx = np.flatnonzero(ks == kg)
        m = len(idx)
        special_row = (idx % 250)[:, None]
        z = random_logits(rng, m, kg)
        z = np.where(special_row == 3, -np.inf, z)
        nan_col = rng.integers(kg, size=m)
        z[np.flatnonzero(special_row[:, 0] == 5), nan_col[special_row[:, 0] == 5]] = np.nan
        z[np.flatnonzero(special_row[:, 0] == 7), nan_col[special_row[:, 0] == 7]] = np.inf
        p, q = softmax_where_defined(rng, z), softmax_where_defined(rng, random_logits(rng, m, kg))
        p[special_row[:, 0] == 5, 0] = np.nan
        p = np.where(special_row == 13, p * 1.01, np.where(special_row == 19, p * (1 + 5e-4), p))
        negative = special_row[:, 0] == 17
        p[negative, :-1] += p[negative, -1:] / (kg - 1) + 0.01
        p[negative, -1] = -0.01 * (kg - 1)
        t = random_distributions(rng, m, kg)
        y = rng.integers(kg, size=m)
        for j, i in enumerate(idx):
            empty = i % 250 == 11
            cols["z"][i] = None if i % 97 == 0 else (z[j, :0] if empty else z[j])
            cols["p"][i] = None if i % 97 == 0 else (p[j, :0] if empty else p[j])
            cols["q"][i] = None if i % 101 == 0 else q[j]
            cols["t"][i] = None if i % 113 == 2 else t[j]
            cols["y"][i] = None if i % 89 == 1 else int(y[j])
    return cols


def list_column(rows):
    lengths = np.array([0 if r is None else len(r) for r in rows])
    offsets = np.concatenate([[0], np.cumsum(lengths)]).astype(np.int32)
    values = np.concatenate([r for r in rows if r is not None and len(r)] or [np.array([])])
    mask = pa.array([r is None for r in rows])
    return pa.ListArray.from_arrays(pa.array(offsets), pa.array(values, pa.float64()), mask=mask)


@cache
def arrow_logs(k):
    cols = logs(k)
    return pa.table(
        {
            "i": np.arange(len(cols["y"])),
            "y": pa.array(cols["y"], pa.int64()),
            **{c: list_column(cols[c]) for c in ("z", "t", "p", "q")},
        }
    )


# ---------------------------------------------------------------- references


def defined_logits(z):
    """Rows softmax is defined on: no NaN, no +inf, at least one class not masked."""
    return (
        ~np.isnan(z).any(axis=1)
        & ~np.isposinf(z).any(axis=1)
        & (z.max(axis=1, initial=-np.inf) > -np.inf)
    )


def distribution(p):
    """CONTRACT: no NaN/inf, no negatives, sum within 1e-3 of 1 -> renormalised; else NaN rows."""
    total = p.sum(axis=1)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(total) & (np.abs(total - 1) <= 1e-3) & ~(p < 0).any(axis=1)
    return np.where(ok[:, None], p / np.where(ok, total, 1)[:, None], np.nan)


def normalised(c):
    """PSI inputs: counts or proportions scaled to sum 1; NaN rows if negative, non-finite or all 0."""
    total = c.sum(axis=1)
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(total) & (total > 0) & ~(c < 0).any(axis=1)
    return np.where(ok[:, None], c / np.where(ok, total, 1)[:, None], np.nan)


def logp_of(z):
    with np.errstate(invalid="ignore"):
        out = special.log_softmax(z, axis=1)  # scipy.special.log_softmax
    out[~defined_logits(z)] = np.nan
    return out


def pick(a, y):
    return np.where(y >= 0, a[np.arange(len(a)), np.maximum(y, 0)], np.nan)


def soft_ce(logp, t):
    """-sum t log p with 0 log 0 = 0 (scipy.special.xlogy convention), in log space."""
    with np.errstate(invalid="ignore"):
        return -np.where(t > 0, t * logp, 0.0).sum(axis=1) + 0 * t.sum(axis=1)


def top2_gap(p):
    s = np.sort(p, axis=1)
    return s[:, -1] - s[:, -2] if p.shape[1] > 1 else np.where(np.isnan(s[:, 0]), np.nan, 1.0)


def argmax_or_nan(a, ok):
    return np.where(ok, np.argmax(np.nan_to_num(a, nan=-np.inf), axis=1), np.nan)


def js_ref(p, q):
    m = 0.5 * (p + q)
    return 0.5 * special.rel_entr(p, m).sum(axis=1) + 0.5 * special.rel_entr(q, m).sum(axis=1)


def calib_bin(conf, bins):
    out = np.searchsorted(
        np.linspace(0, 1, bins + 1)[1:-1], np.nan_to_num(conf), side="left"
    ).astype(float)
    return np.where(np.isnan(conf), np.nan, out)


# name -> (SQL call, columns used, reference over stacked float64 matrices of one K)
REFERENCES = {
    "log_softmax": ("log_softmax(z)", "z", lambda c: logp_of(c["z"])),
    "softmax": ("softmax(z)", "z", lambda c: np.exp(logp_of(c["z"]))),
    "logsumexp": (
        "logsumexp(z)",
        "z",
        lambda c: np.where(defined_logits(c["z"]), special.logsumexp(c["z"], axis=1), np.nan),
    ),
    "cross_entropy": ("cross_entropy(z, y)", "zy", lambda c: -pick(logp_of(c["z"]), c["y"])),
    "soft_cross_entropy": (
        "soft_cross_entropy(z, t)",
        "zt",
        lambda c: soft_ce(logp_of(c["z"]), distribution(c["t"])),
    ),
    "softmax_entropy": (
        "softmax_entropy(z)",
        "z",
        lambda c: special.entr(np.exp(logp_of(c["z"]))).sum(axis=1),
    ),
    "predicted_class": (
        "predicted_class(z)",
        "z",
        lambda c: argmax_or_nan(c["z"], defined_logits(c["z"])),
    ),
    "is_correct": (
        "is_correct(z, y)",
        "zy",
        lambda c: np.where(
            defined_logits(c["z"]) & (c["y"] >= 0),
            np.argmax(np.nan_to_num(c["z"], nan=0), axis=1) == c["y"],
            np.nan,
        ),
    ),
    "confidence": ("confidence(z)", "z", lambda c: np.exp(logp_of(c["z"])).max(axis=1)),
    "margin": ("margin(z)", "z", lambda c: top2_gap(np.exp(logp_of(c["z"])))),
    "brier_score": (
        "brier_score(z, y)",
        "zy",
        lambda c: np.where(
            c["y"] >= 0,
            ((np.exp(logp_of(c["z"])) - np.eye(c["z"].shape[1])[np.maximum(c["y"], 0)]) ** 2).sum(
                axis=1
            ),
            np.nan,
        ),
    ),
    "calibration_bin": (
        "calibration_bin(confidence(z), 15)",
        "z",
        lambda c: calib_bin(np.exp(logp_of(c["z"])).max(axis=1), 15),
    ),
    "as_distribution": ("as_distribution(p)", "p", lambda c: distribution(c["p"])),
    "cross_entropy_probs": (
        "cross_entropy_probs(p, y)",
        "py",
        lambda c: -np.log(pick(distribution(c["p"]), c["y"])),
    ),
    "soft_cross_entropy_probs": (
        "soft_cross_entropy_probs(p, t)",
        "pt",
        lambda c: -special.xlogy(distribution(c["t"]), distribution(c["p"])).sum(axis=1),
    ),
    "kl_divergence": (
        "kl_divergence(p, q)",
        "pq",
        lambda c: special.rel_entr(distribution(c["p"]), distribution(c["q"])).sum(axis=1),
    ),
    "js_divergence": (
        "js_divergence(p, q)",
        "pq",
        lambda c: js_ref(distribution(c["p"]), distribution(c["q"])),
    ),
    "population_stability_index": (
        "population_stability_index(p, q)",
        "pq",
        lambda c: (
            special.rel_entr(normalised(c["p"]), normalised(c["q"]))
            + special.rel_entr(normalised(c["q"]), normalised(c["p"]))
        ).sum(axis=1),
    ),
    "shannon_entropy": (
        "shannon_entropy(p)",
        "p",
        lambda c: special.entr(distribution(c["p"])).sum(axis=1),
    ),
    # predicted_class again, this time on the probability column
    "predicted_class_probs": (
        "predicted_class(p)",
        "p",
        lambda c: argmax_or_nan(
            c["p"], ~np.isnan(c["p"]).any(axis=1) & ~np.isposinf(c["p"]).any(axis=1)
        ),
    ),
    "confidence_probs": ("confidence_probs(p)", "p", lambda c: distribution(c["p"]).max(axis=1)),
    "margin_probs": ("margin_probs(p)", "p", lambda c: top2_gap(distribution(c["p"]))),
    "brier_score_probs": (
        "brier_score_probs(p, y)",
        "py",
        lambda c: np.where(
            c["y"] >= 0,
            ((distribution(c["p"]) - np.eye(c["p"].shape[1])[np.maximum(c["y"], 0)]) ** 2).sum(
                axis=1
            ),
            np.nan,
        ),
    ),
}
LIST_RESULTS = {"log_softmax", "softmax", "as_distribution"}


def null_row(r):
    return np.isscalar(r) or np.isnan(r).all()


def reference(name, k):
    """Per-row reference values (arrays for list results, NaN = NULL), one K group at a time."""
    _, used, fn = REFERENCES[name]
    cols = logs(k)
    n = len(cols["y"])
    out = [np.nan] * n
    lists = [c for c in used if c != "y"]
    present = [
        i for i in range(n) if all(cols[c][i] is not None and len(cols[c][i]) for c in lists)
    ]
    lengths = np.array([len(cols[lists[0]][i]) for i in present])
    for k_group in np.unique(lengths):
        rows = [i for i, length in zip(present, lengths) if length == k_group]
        stacked = {c: np.array([cols[c][i] for i in rows]) for c in lists}
        stacked["y"] = np.array([-1 if cols["y"][i] is None else cols["y"][i] for i in rows])
        with np.errstate(all="ignore"):
            values = fn(stacked)
        for i, v in zip(rows, values):
            out[i] = v
    return out


# ---------------------------------------------------------------- comparison


def assert_agree(got, ref, what):
    """NULL exactly where ref is NaN, infinities exact, finite values to RTOL (ATOL floor)."""
    got = np.asarray(got, float)
    ref = np.asarray(ref, float)
    null_got, null_ref = np.isnan(got), np.isnan(ref)
    bad = np.flatnonzero(null_got != null_ref)
    assert not len(bad), (
        f"{what}: NULL mismatch at {bad[:5]}: got {got[bad[:5]]}, expected {ref[bad[:5]]}"
    )
    inf = np.isinf(ref) | np.isinf(got)
    bad = np.flatnonzero(inf & (got != ref))
    assert not len(bad), (
        f"{what}: inf mismatch at {bad[:5]}: got {got[bad[:5]]}, expected {ref[bad[:5]]}"
    )
    ok = ~null_ref & ~inf
    err = np.abs(got[ok] - ref[ok]) - (RTOL * np.abs(ref[ok]) + ATOL)
    worst = int(np.argmax(err)) if err.size else 0
    assert not err.size or err[worst] <= 0, (
        f"{what}: got {got[ok][worst]!r}, expected {ref[ok][worst]!r} (row value {worst} of the finite ones)"
    )


def sql_column(con, k, call):
    con.register("logs", arrow_logs(k))
    return (
        con.sql(f"SELECT {call} AS v FROM logs ORDER BY i")
        .to_arrow_table()
        .column("v")
        .combine_chunks()
    )


def as_floats(col):
    if pa.types.is_boolean(col.type):
        col = pc.cast(col, pa.float64())
    values = col.cast(pa.float64()).fill_null(0).to_numpy(zero_copy_only=False)
    assert not np.isnan(values).any(), "a NaN escaped into SQL instead of NULL"
    return np.where(col.is_null().to_numpy(zero_copy_only=False), np.nan, values)


@pytest.mark.parametrize("k", KS)
@pytest.mark.parametrize("name", sorted(REFERENCES))
def test_function_agrees_with_reference(module_con, name, k):
    call = REFERENCES[name][0]
    col = sql_column(module_con, k, call)
    ref = reference(name, k)
    if name in LIST_RESULTS:
        row_null = np.array([null_row(r) for r in ref])
        assert_agree(
            np.where(col.is_null().to_numpy(zero_copy_only=False), np.nan, 0),
            np.where(row_null, np.nan, 0),
            f"{call} row NULLs, K={k}",
        )
        lengths = pc.list_value_length(col).fill_null(0).to_numpy(zero_copy_only=False)
        assert lengths.tolist() == [0 if null_row(r) else len(r) for r in ref]
        flat = [r for r in ref if not null_row(r)]
        assert_agree(as_floats(col.flatten()), np.concatenate(flat), f"{call} values, K={k}")
    else:
        assert_agree(as_floats(col), np.array(ref, float), f"{call}, K={k}")


# ---------------------------------------------------------------- row statistics


def row_stats_reference(kind, k, bins=10):
    """Expected fields of logit_row_stats / prob_row_stats from the references above."""
    cols = logs(k)
    scores = cols["z" if kind == "logit" else "p"]
    classes = np.array([np.nan if s is None or not len(s) else len(s) for s in scores])
    y = np.array([np.nan if v is None else v for v in cols["y"]])
    prefix = "" if kind == "logit" else "_probs"
    conf = np.array(reference("confidence" + prefix, k), float)
    if kind == "logit":
        issue = np.where(np.isnan(classes), 1, np.where(np.isnan(conf), 2, 0))
    else:
        dist = np.array([null_row(r) for r in reference("as_distribution", k)])
        invalid = np.array(
            [s is not None and len(s) > 0 and not np.isfinite(s).all() for s in scores]
        )
        issue = np.where(np.isnan(classes), 1, np.where(invalid, 2, np.where(dist, 3, 0)))
    label_issue = np.where(np.isnan(y), 1, np.where((y >= classes) | (y < 0), 2, 0))
    scored, labelled = issue == 0, (issue == 0) & (label_issue == 0)
    predicted = np.array(
        reference("predicted_class" + ("" if kind == "logit" else "_probs"), k), float
    )
    loss = np.array(reference("cross_entropy" + prefix, k), float)
    brier = np.array(reference("brier_score" + prefix, k), float)
    entropy = np.array(
        reference("softmax_entropy" if kind == "logit" else "shannon_entropy", k), float
    )
    return {
        "score_issue": issue.astype(float),
        "label_issue": label_issue.astype(float),
        "classes": classes,
        "loss": np.where(labelled, loss, np.nan),
        "confidence": np.where(scored, conf, np.nan),
        "predicted": np.where(scored, predicted, np.nan),
        "correct": np.where(labelled, predicted == y, np.nan),
        "brier": np.where(labelled, brier, np.nan),
        "entropy": np.where(scored, entropy, np.nan),
        "bin": np.where(scored, calib_bin(conf, bins), np.nan),
    }


@pytest.mark.parametrize("k", KS)
@pytest.mark.parametrize("kind", ["logit", "prob"])
def test_row_stats_agree_with_references(module_con, implementation, kind, k):
    col = sql_column(module_con, k, f"{kind}_row_stats({'z' if kind == 'logit' else 'p'}, y, 10)")
    expected = row_stats_reference(kind, k)
    if implementation == "macros":
        # The macros sum in DuckDB's order, so a confidence lying exactly on a bin edge (the
        # generated rows put some there) may round to the other side: their bin is checked
        # against their own confidence, itself held to the reference above.
        conf = as_floats(col.field("confidence"))
        expected["bin"] = np.where(np.isnan(conf), np.nan, calib_bin(conf, 10))
    for field, want in expected.items():
        assert_agree(as_floats(col.field(field)), want, f"{kind}_row_stats.{field}, K={k}")


# ---------------------------------------------------------------- binary single scores


@cache
def binary_logs():
    rng = np.random.default_rng(2049)
    n = 5000
    s = rng.normal(0, 1, n) * rng.choice([0.3, 3.0, 12.0], n)
    s[rng.random(n) < 0.01] = 1e4
    s[rng.random(n) < 0.01] = -1e4
    s[rng.random(n) < 0.01] = -np.inf
    s[rng.random(n) < 0.01] = np.inf
    s[rng.random(n) < 0.01] = np.nan
    p = special.expit(s)
    p[rng.random(n) < 0.01] = 1.5
    p[rng.random(n) < 0.01] = -0.25
    y = rng.integers(0, 2, n).astype(float)
    s_null, y_null = rng.random(n) < 0.02, rng.random(n) < 0.02
    y[y_null] = np.nan
    table = pa.table(
        {
            "i": np.arange(n),
            "s": pa.array(s, mask=s_null),
            "p": pa.array(p, mask=s_null),
            "y": pa.array(np.nan_to_num(y).astype(np.int64), mask=y_null),
        }
    )
    s = np.where(s_null, np.nan, s)
    return table, s, np.where(s_null | np.isnan(s), np.nan, p), y


def binary_reference(name, s, p, y):
    with np.errstate(all="ignore"):
        if name == "binary_cross_entropy":  # logits [0, s]: scipy.special.log_softmax
            logp = special.log_softmax(np.column_stack([np.zeros_like(s), s]), axis=1)
            out = -np.where(y == 1, logp[:, 1], logp[:, 0])
            return np.where(np.isposinf(s) | np.isnan(y), np.nan, out)
        valid = (p >= 0) & (p <= 1) & ~np.isnan(y)
        if name == "binary_cross_entropy_prob":  # sklearn log_loss without its eps clip: -xlogy
            out = -special.xlogy(y, p) - special.xlogy(1 - y, 1 - p)
        else:  # binary Brier, (p - y)^2 (Brier 1950, halved)
            out = (p - y) ** 2
        return np.where(valid, out, np.nan)


@pytest.mark.parametrize(
    "name", ["binary_cross_entropy", "binary_cross_entropy_prob", "binary_brier_score"]
)
def test_binary_functions_agree_with_references(module_con, name):
    table, s, p, y = binary_logs()
    module_con.register("b", table)
    arg = "s" if name == "binary_cross_entropy" else "p"
    col = module_con.sql(f"SELECT {name}({arg}, y) AS v FROM b ORDER BY i").to_arrow_table()
    col = col.column("v").combine_chunks()
    assert_agree(as_floats(col), binary_reference(name, s, p, y), name)


# ---------------------------------------------------------------- tail probabilities


def test_normal_sf_agrees_with_scipy(module_con):
    """normal_sf against scipy.stats.norm.sf on z statistics over the whole range (both
    tails, both branches of the macro's erfc, +/-inf), NULL for NULL and NaN."""
    rng = np.random.default_rng(11)
    z = np.concatenate(
        [
            rng.normal(0, 3, 3000),
            np.linspace(-38, 38, 1521),
            [0.0, 5e-324, -5e-324, 2.1213203435596424, np.inf, -np.inf, np.nan],
        ]
    )
    values = pa.array(z, pa.float64(), mask=np.arange(len(z)) % 97 == 5)
    module_con.register("stats", pa.table({"i": np.arange(len(z)), "z": values}))
    col = module_con.sql("SELECT normal_sf(z) AS v FROM stats ORDER BY i").to_arrow_table()
    ref = np.where(values.is_null().to_numpy(zero_copy_only=False), np.nan, stats.norm.sf(z))
    got = as_floats(col.column("v").combine_chunks())
    assert_agree(got, ref, "normal_sf")
    tail = ref > 1e-300  # beyond, both round to subnormals or 0
    np.testing.assert_allclose(got[tail], ref[tail], rtol=1e-12)
    assert np.isnan(got[-1]) and got[-3] == 0.0 and got[-2] == 1.0
