"""version_gap: two versions compared per period x segment, paired by id or unpaired.

References: the paired form's mean and standard error against scipy.stats.ttest_rel (the SE
is the difference over the t statistic); the unpaired form's against scipy.stats.ttest_ind
with equal_var=False (Welch 1947); McNemar's (1947) test against scipy.stats.binomtest
(two-sided, p = 1/2, on the discordant pairs) below exact_below discordant pairs and against
scipy.stats.chi2.sf((b - c)^2 / (b + c), 1) above; ECE as Guo et al. (2017); p-values of the
z tests against scipy.stats.norm.sf; per-row losses from scipy.special.log_softmax.
"""

import datetime as dt

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy import stats
from scipy.special import log_softmax, softmax

from dbmetrics.errors import DbmetricsError, DbmetricsWarning
from dbmetrics.queries import run_query

START = dt.datetime(2026, 1, 5)
K = 4


def shadow_log(path, n=1500, seed=5, shadow=True, days=7):
    """Both versions score predictions of one week; v2 is the sharper model. shadow: v2
    scores the same ids as v1 (its own inputs otherwise). Returns per version the logits,
    labels and ids, in log order."""
    rng = np.random.default_rng(seed)
    signal = rng.normal(size=(n, K)) * 1.4
    y = np.array([rng.choice(K, p=p) for p in softmax(signal, axis=1)])
    other = rng.normal(size=(n, K)) * 1.4
    y_other = np.array([rng.choice(K, p=p) for p in softmax(other, axis=1)])
    base_b = signal if shadow else other
    versions = {
        "v1": (0.6 * signal + rng.normal(size=(n, K)), y, np.arange(n)),
        "v2": (
            base_b + 0.5 * rng.normal(size=(n, K)),
            y if shadow else y_other,
            np.arange(n) if shadow else np.arange(n, 2 * n),
        ),
    }
    hours = rng.integers(0, 24 * days, n)
    table = pa.concat_tables(
        pa.table(
            {
                "ts": pa.array(
                    [START + dt.timedelta(hours=int(h)) for h in hours], pa.timestamp("us")
                ),
                "model_version": [name] * n,
                "prediction_id": pa.array(ids, pa.int64()),
                "logits": pa.array(list(z), pa.list_(pa.float64())),
                "label": pa.array(labels, pa.int64()),
            }
        )
        for name, (z, labels, ids) in versions.items()
    )
    pq.write_table(table, path)
    return versions


def per_row(z, y):
    """Cross-entropy, correctness, Brier (sum over classes) and confidence of each row."""
    logp = log_softmax(z, axis=1)
    p = np.exp(logp)
    loss = -logp[np.arange(len(y)), y]
    correct = (p.argmax(axis=1) == y).astype(float)
    brier = ((p - np.eye(K)[y]) ** 2).sum(axis=1)
    return {"cross_entropy": loss, "accuracy": correct, "brier_multiclass": brier}, p.max(axis=1)


def ece_terms(correct, conf, bins=15):
    """ECE (Guo et al. 2017, sklearn's right-closed bins) and each row's delta-method term
    s_b (correct - m_b), whose sum is n ECE."""
    b = np.searchsorted(np.linspace(0, 1, bins + 1)[1:-1], conf, side="left")
    u = np.zeros(len(conf))
    for j in np.unique(b):
        rows = b == j
        gap = correct[rows].sum() - conf[rows].sum()
        u[rows] = (1 if gap >= 0 else -1) * (correct[rows] - conf[rows].mean())
    return u.mean(), u


def by_metric(table):
    return {r["metric"]: r for r in table.to_pylist()}


def run(con, path, **params):
    return run_query(con, "version_gap", {"logs": str(path), **params})


def test_shadow_logs_take_the_paired_form_as_scipy_ttest_rel(con, tmp_path):
    versions = shadow_log(tmp_path / "log.parquet")
    got = by_metric(run(con, tmp_path / "log.parquet", id_col="prediction_id", grain="month"))
    a, conf_a = per_row(*versions["v1"][:2])
    b, conf_b = per_row(*versions["v2"][:2])
    for metric in ("cross_entropy", "accuracy", "brier_multiclass"):
        row = got[metric]
        assert (row["form"], row["version_a"], row["version_b"]) == ("paired", "v1", "v2")
        assert row["paired_rows"] == row["evaluated_a"] == row["evaluated_b"] == 1500
        ref = stats.ttest_rel(b[metric], a[metric])  # scipy: mean difference / its SE
        diff = (b[metric] - a[metric]).mean()
        assert row["value_a"] == pytest.approx(a[metric].mean(), rel=1e-12)
        assert row["value_b"] == pytest.approx(b[metric].mean(), rel=1e-12)
        assert row["difference"] == pytest.approx(diff, rel=1e-9, abs=1e-15)
        assert row["difference_se"] == pytest.approx(diff / ref.statistic, rel=1e-9)
        assert row["ci_low"] == pytest.approx(diff - 1.959963984540054 * row["difference_se"])
        if metric != "accuracy":
            assert row["test"] == "paired_z"
            z = diff / row["difference_se"]
            assert row["p_value"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-9)
    assert got["cross_entropy"]["difference"] < 0  # v2 is the better model
    predicted_a = versions["v1"][0].argmax(axis=1)
    predicted_b = versions["v2"][0].argmax(axis=1)
    assert got["accuracy"]["disagreement_rate"] == pytest.approx(
        (predicted_a != predicted_b).mean()
    )
    ece_a, u_a = ece_terms(a["accuracy"], conf_a)
    ece_b, u_b = ece_terms(b["accuracy"], conf_b)
    ece = got["ece"]
    assert ece["value_a"] == pytest.approx(ece_a, rel=1e-9)
    assert ece["value_b"] == pytest.approx(ece_b, rel=1e-9)
    assert ece["difference_se"] == pytest.approx((u_b - u_a).std(ddof=1) / np.sqrt(1500), rel=1e-9)


def test_without_pairs_the_unpaired_form_is_welch(con, tmp_path):
    versions = shadow_log(tmp_path / "log.parquet", shadow=False)
    got = by_metric(run(con, tmp_path / "log.parquet", id_col="prediction_id", grain="month"))
    a, conf_a = per_row(*versions["v1"][:2])
    b, conf_b = per_row(*versions["v2"][:2])
    for metric in ("cross_entropy", "accuracy", "brier_multiclass"):
        row = got[metric]
        assert (row["form"], row["test"], row["paired_rows"]) == ("unpaired", "welch_z", 0)
        ref = stats.ttest_ind(b[metric], a[metric], equal_var=False)  # Welch's t
        diff = b[metric].mean() - a[metric].mean()
        assert row["difference"] == pytest.approx(diff, rel=1e-9)
        assert row["difference_se"] == pytest.approx(diff / ref.statistic, rel=1e-9)
        z = diff / row["difference_se"]
        assert row["p_value"] == pytest.approx(2 * stats.norm.sf(abs(z)), rel=1e-9)
        assert row["discordant_a"] is None and row["disagreement_rate"] is None
    # ECE's delta-method SE from the state: bins' mean confidence for each row's confidence
    terms = {}
    for version, (metric_rows, conf) in {"a": (a, conf_a), "b": (b, conf_b)}.items():
        value, terms[version] = ece_terms(metric_rows["accuracy"], conf)
        assert got["ece"][f"value_{version}"] == pytest.approx(value, rel=1e-9)
    se = np.sqrt(sum(u.var(ddof=1) / len(u) for u in terms.values()))
    assert got["ece"]["difference_se"] == pytest.approx(se, rel=1e-9)


def test_shadow_logs_without_id_col_are_unpaired(con, tmp_path):
    versions = shadow_log(tmp_path / "log.parquet")
    got = by_metric(run(con, tmp_path / "log.parquet", grain="month"))
    a, _ = per_row(*versions["v1"][:2])
    b, _ = per_row(*versions["v2"][:2])
    row = got["cross_entropy"]
    assert (row["form"], row["paired_rows"]) == ("unpaired", 0)
    ref = stats.ttest_ind(b["cross_entropy"], a["cross_entropy"], equal_var=False)
    assert row["difference_se"] == pytest.approx(row["difference"] / ref.statistic, rel=1e-9)
    paired = by_metric(run(con, tmp_path / "log.parquet", id_col="prediction_id", grain="month"))
    assert paired["cross_entropy"]["difference_se"] < row["difference_se"]  # pairing helps


def test_a_few_pairs_do_not_make_a_cell_paired(con, tmp_path):
    shadow_log(tmp_path / "log.parquet", shadow=False)
    table = pq.read_table(tmp_path / "log.parquet")
    ids = table.column("prediction_id").to_numpy().copy()
    ids[1500:1600] = np.arange(100)  # 100 of v2's 1500 ids also scored by v1
    table = table.set_column(2, "prediction_id", pa.array(ids, pa.int64()))
    pq.write_table(table, tmp_path / "some.parquet")
    params = {"id_col": "prediction_id", "grain": "month"}
    row = by_metric(run(con, tmp_path / "some.parquet", **params))["accuracy"]
    assert (row["form"], row["paired_rows"]) == ("unpaired", 100)
    row = by_metric(run(con, tmp_path / "some.parquet", paired_share="0.05", **params))["accuracy"]
    assert (row["form"], row["paired_rows"], row["evaluated_a"]) == ("paired", 100, 1500)


def mcnemar_log(path, both, only_a, only_b, neither):
    """Pairs of K-class rows, label 0, whose correctness follows the four counts."""
    right, wrong = [2.0, 0.0, 0.0, 0.0], [0.0, 2.0, 0.0, 0.0]
    pattern = (
        [(right, right)] * both
        + [(right, wrong)] * only_a
        + [(wrong, right)] * only_b
        + [(wrong, wrong)] * neither
    )
    n = len(pattern)
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([START] * (2 * n), pa.timestamp("us")),
                "model_version": ["v1"] * n + ["v2"] * n,
                "prediction_id": pa.array(list(range(n)) * 2, pa.int64()),
                "logits": [p[0] for p in pattern] + [p[1] for p in pattern],
                "label": pa.array([0] * (2 * n), pa.int64()),
            }
        ),
        path,
    )


@pytest.mark.parametrize("only_a,only_b", [(3, 9), (7, 7), (0, 5), (12, 1), (0, 0)])
def test_few_discordant_pairs_take_the_exact_mcnemar_test(con, tmp_path, only_a, only_b):
    mcnemar_log(tmp_path / "log.parquet", 40, only_a, only_b, 10)
    row = by_metric(run(con, tmp_path / "log.parquet", id_col="prediction_id"))["accuracy"]
    assert (row["test"], row["discordant_a"], row["discordant_b"]) == (
        "mcnemar_exact",
        only_a,
        only_b,
    )
    # scipy's two-sided binomial test; no discordant pair is no evidence either way (p = 1)
    want = stats.binomtest(only_b, only_a + only_b, 0.5).pvalue if only_a + only_b else 1.0
    assert row["p_value"] == pytest.approx(want, rel=1e-9)
    assert row["difference"] == pytest.approx((only_b - only_a) / (50 + only_a + only_b))


@pytest.mark.parametrize("only_a,only_b", [(20, 36), (30, 30), (11, 14)])
def test_many_discordant_pairs_take_the_chi_square_mcnemar_test(con, tmp_path, only_a, only_b):
    mcnemar_log(tmp_path / "log.parquet", 100, only_a, only_b, 20)
    row = by_metric(run(con, tmp_path / "log.parquet", id_col="prediction_id"))["accuracy"]
    assert row["test"] == "mcnemar_chi2"
    statistic = (only_b - only_a) ** 2 / (only_a + only_b)  # McNemar 1947, no correction
    assert row["p_value"] == pytest.approx(stats.chi2.sf(statistic, 1), rel=1e-9)
    exact = by_metric(
        run(con, tmp_path / "log.parquet", id_col="prediction_id", exact_below="100")
    )["accuracy"]
    assert exact["test"] == "mcnemar_exact"
    assert exact["p_value"] == pytest.approx(
        stats.binomtest(only_a, only_a + only_b, 0.5).pvalue, rel=1e-9
    )


def three_versions(path):
    """v1 from Monday, v3 from Wednesday, v2 from Friday of one week (first appearance)."""
    rows = [("v1", 0), ("v3", 2), ("v2", 4), ("v1", 5), ("v3", 5)]
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(
                    [START + dt.timedelta(days=d, hours=h) for _, d in rows for h in range(3)],
                    pa.timestamp("us"),
                ),
                "model_version": [v for v, _ in rows for _ in range(3)],
                "logits": [[1.0, 0.0], [0.0, 1.0], [0.5, 0.0]] * len(rows),
                "label": pa.array([0, 1, 1] * len(rows), pa.int64()),
            }
        ),
        path,
    )


def test_the_default_versions_are_the_two_most_recent_by_first_appearance(con, tmp_path):
    three_versions(tmp_path / "log.parquet")
    first = run(con, tmp_path / "log.parquet").to_pylist()[0]
    assert (first["version_a"], first["version_b"]) == ("v3", "v2")
    first = run(con, tmp_path / "log.parquet", version_a="v1").to_pylist()[0]
    assert (first["version_a"], first["version_b"]) == ("v1", "v2")
    first = run(con, tmp_path / "log.parquet", version_b="v1").to_pylist()[0]
    assert (first["version_a"], first["version_b"]) == ("v2", "v1")


@pytest.mark.parametrize(
    "params,message",
    [
        ({"version_a": "v9"}, "version_a: no rows of version `v9`; the versions are: v1, v3, v2"),
        ({"version_b": "V2"}, "version_b: no rows of version `V2`; the versions are: v1, v3, v2"),
        ({"version_a": "v3", "version_b": "v3"}, "version_a and version_b are both `v3`"),
    ],
)
def test_versions_that_cannot_be_compared_are_errors(con, tmp_path, params, message):
    three_versions(tmp_path / "log.parquet")
    with pytest.raises(DbmetricsError, match=message):
        run(con, tmp_path / "log.parquet", **params)


def test_a_log_of_one_version_is_an_error(con, tmp_path):
    mcnemar_log(tmp_path / "log.parquet", 3, 0, 0, 0)
    table = pq.read_table(tmp_path / "log.parquet").slice(0, 3)
    pq.write_table(table, tmp_path / "one.parquet")
    with pytest.raises(
        DbmetricsError, match="compares two versions; the versions with rows are: v1"
    ):
        run(con, tmp_path / "one.parquet")


def test_a_cell_without_one_version_has_null_differences(con, tmp_path):
    shadow_log(tmp_path / "log.parquet", days=14)
    table = pq.read_table(tmp_path / "log.parquet")
    second_week = np.array(table.column("ts").to_pylist()) >= START + dt.timedelta(days=7)
    v2 = np.array(table.column("model_version").to_pylist()) == "v2"
    pq.write_table(table.filter(pa.array(~(second_week & v2))), tmp_path / "gap.parquet")
    got = run(con, tmp_path / "gap.parquet", id_col="prediction_id").to_pylist()
    weeks = {}
    for row in got:
        weeks.setdefault(row["period"], []).append(row)
    first, second = (weeks[p] for p in sorted(weeks))
    assert all(r["form"] == "paired" for r in first)
    assert all(
        r["form"] is None
        and r["evaluated_b"] == 0
        and r["value_a"] is not None
        and r["value_b"] is r["difference"] is r["difference_se"] is r["p_value"] is None
        for r in second
    )


def test_segments_are_compared_separately(con, tmp_path):
    versions = shadow_log(tmp_path / "log.parquet")
    table = pq.read_table(tmp_path / "log.parquet")
    ids = table.column("prediction_id").to_numpy()
    table = table.append_column("region", pa.array(np.where(ids % 3 == 0, "north", "south")))
    pq.write_table(table, tmp_path / "seg.parquet")
    got = run(con, tmp_path / "seg.parquet", id_col="prediction_id", segment_cols="region")
    north = [
        r for r in got.to_pylist() if r["region"] == "north" and r["metric"] == "cross_entropy"
    ]
    a, _ = per_row(*versions["v1"][:2])
    b, _ = per_row(*versions["v2"][:2])
    rows = np.arange(1500) % 3 == 0
    ref = stats.ttest_rel(b["cross_entropy"][rows], a["cross_entropy"][rows])
    (row,) = north
    assert row["paired_rows"] == rows.sum()
    assert row["difference_se"] == pytest.approx(row["difference"] / ref.statistic, rel=1e-9)


def test_versions_that_never_ran_together_give_a_warning(con, tmp_path):
    shadow_log(tmp_path / "log.parquet", days=14)
    table = pq.read_table(tmp_path / "log.parquet")
    second_week = np.array(table.column("ts").to_pylist()) >= START + dt.timedelta(days=7)
    v2 = np.array(table.column("model_version").to_pylist()) == "v2"
    pq.write_table(table.filter(pa.array(second_week == v2)), tmp_path / "apart.parquet")
    with pytest.warns(DbmetricsWarning, match="none of the 2 period x segment cells has"):
        got = run(con, tmp_path / "apart.parquet", id_col="prediction_id")
    assert got.num_rows == 8 and got.column("difference").null_count == 8


def test_a_partials_store_gives_the_unpaired_form_of_the_logs_with_a_warning(con, tmp_path):
    from dbmetrics import partials

    shadow_log(tmp_path / "log.parquet")
    logs = {"logs": str(tmp_path / "log.parquet"), "id_col": "prediction_id"}
    partials.update(con, logs, tmp_path / "store")
    with pytest.warns(DbmetricsWarning, match="a partials store keeps sums, not rows"):
        stored = run_query(con, "version_gap", {"partials": str(tmp_path / "store")})
    scanned = run(con, tmp_path / "log.parquet")  # no id_col: unpaired
    assert set(stored.column("form").to_pylist()) == {"unpaired"}
    for name in ("value_a", "value_b", "difference", "difference_se", "p_value"):
        np.testing.assert_allclose(
            stored.column(name).to_numpy(), scanned.column(name).to_numpy(), rtol=1e-12
        )
    assert stored.column("metric").to_pylist() == scanned.column("metric").to_pylist()
