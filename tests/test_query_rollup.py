"""rollup, calibration and segments against an independent numpy computation (and the
intervals against scipy and the formulas of their papers).

The reference below recomputes every number from the raw rows, one row at a time, binning
confidence with np.linspace edges and searchsorted(side='left') on the inner edges
(sklearn calibration_curve's rule: bin m holds m/B < c <= (m+1)/B, c = 0 in bin 0).
"""

import datetime as dt
from collections import defaultdict

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.special import logsumexp
from scipy.stats import binomtest, norm
from sklearn.calibration import calibration_curve

import dbmetrics
from dbmetrics.queries import run_query

START = dt.date(2026, 1, 5)  # a Monday
Z = norm.ppf(0.975)  # the 95% intervals' standard normal quantile


def random_logs(rng, n=1500, k=4, days=42, versions=("v1", "v2"), segments=("a", "b")):
    """Rows of a prediction log with every kind of awkward row mixed in (as Python lists)."""
    logits = rng.normal(size=(n, k)) * 2.0
    p = np.exp(logits - logsumexp(logits, axis=1, keepdims=True))
    labels = np.array([rng.choice(k, p=row) for row in p])
    rows = {
        "ts": [
            dt.datetime.combine(START + dt.timedelta(days=int(d)), dt.time(int(h)))
            for d, h in zip(rng.integers(0, days, n), rng.integers(0, 24, n))
        ],
        "model_version": list(rng.choice(versions, n)),
        "region": list(rng.choice(segments, n)),
        "logits": [list(r) for r in logits],
        "label": [int(y) for y in labels],
    }
    awkward = rng.permutation(n)[:60]
    for i in awkward[:8]:
        rows["logits"][i] = None  # missing scores
    for i in awkward[8:12]:
        rows["logits"][i] = []  # empty list: missing
    for i in awkward[12:18]:
        rows["logits"][i][1] = float("nan")  # invalid
    for i in awkward[18:22]:
        rows["logits"][i][0] = float("inf")  # invalid (+inf logit)
    for i in awkward[22:30]:  # masked true class: infinite loss
        rows["logits"][i][rows["label"][i]] = float("-inf")
    for i in awkward[30:45]:
        rows["label"][i] = None  # not yet labelled
    for i in awkward[45:52]:
        rows["label"][i] = k + 3  # out of range
    for i in awkward[52:55]:
        rows["label"][i] = -1  # out of range
    return rows


def write_parquet(rows, path, logits_type=None):
    types = {
        "ts": pa.timestamp("us"),
        "model_version": pa.string(),
        "region": pa.string(),
        "logits": pa.list_(logits_type or pa.float64()),
        "label": pa.int64(),
    }
    table = pa.table(
        {name: pa.array(values, type=types.get(name)) for name, values in rows.items()}
    )
    pq.write_table(table, path)
    return path


def period_of(ts, grain):
    day = ts.date() if isinstance(ts, dt.datetime) else ts
    if grain == "day":
        return day
    if grain == "week":
        return day - dt.timedelta(days=day.weekday())
    return day.replace(day=1)


def row_stats(scores, label, bins):
    """(issue, stats) for one row, issue in missing/invalid/unlabelled/bad/inf/ok."""
    if scores is None or len(scores) == 0:
        return "missing", None
    z = np.asarray(scores, dtype=float)
    if np.isnan(z).any() or np.isposinf(z).any() or np.isneginf(z).all():
        return "invalid", None
    logp = z - logsumexp(z)
    p = np.exp(logp)
    conf = p.max()
    stats = {
        "conf": conf,
        "pred": int(np.argmax(z)),
        "entropy": -np.sum(np.where(p > 0, p * np.where(p > 0, logp, 0.0), 0.0)),
        "bin": int(np.searchsorted(np.linspace(0, 1, bins + 1)[1:-1], conf, side="left")),
    }
    if label is None:
        return "unlabelled", stats
    if not 0 <= label < len(z):
        return "bad", stats
    if p[label] == 0:
        return "inf", stats
    onehot = np.eye(len(z))[label]
    stats.update(
        loss=-logp[label], correct=float(stats["pred"] == label), brier=np.sum((p - onehot) ** 2)
    )
    return "ok", stats


def expected_groups(rows, keys, grain="week", bins=15):
    """{(period, *key values): list of (issue, stats, has_label)} from raw rows."""
    groups = defaultdict(list)
    for i, ts in enumerate(rows["ts"]):
        key = (period_of(ts, grain), *(rows[c][i] for c in keys))
        issue, stats = row_stats(rows["logits"][i], rows["label"][i], bins)
        groups[key].append((issue, stats, rows["label"][i] is not None))
    return groups


def expected_rollup(rows, keys, grain="week", bins=15):
    """{key: {column: value}} for the rollup template, computed row by row with numpy."""
    out = {}
    for key, items in expected_groups(rows, keys, grain, bins).items():
        ok = [s for issue, s, _ in items if issue == "ok"]
        scored = [s for issue, s, _ in items if issue not in ("missing", "invalid")]

        def count(wanted, items=items):
            return sum(1 for issue, _, _ in items if issue == wanted)

        loss = np.array([s["loss"] for s in ok])
        brier = np.array([s["brier"] for s in ok])
        n = len(ok)
        out[key] = {
            "rows": len(items),
            "labelled_rows": sum(1 for _, _, has_label in items if has_label),
            "evaluated_rows": n,
            "cross_entropy": loss.mean() if n else None,
            "cross_entropy_se": loss.std(ddof=1) / np.sqrt(n) if n > 1 else None,
            "perplexity": np.exp(loss.mean()) if n else None,
            "accuracy": np.mean([s["correct"] for s in ok]) if n else None,
            "brier": brier.mean() if n else None,
            # the standard error of a mean from the row-level values
            "brier_se": brier.std(ddof=1) / np.sqrt(n) if n > 1 else None,
            "brier_multiclass_se": brier.std(ddof=1) / np.sqrt(n) if n > 1 else None,
            "ece": ece_mce(ok, bins)[0] if n else None,
            **(l2_calibration(ok, bins) if n else dict.fromkeys(L2_COLUMNS)),
            "mean_confidence": np.mean([s["conf"] for s in scored]) if scored else None,
            "mean_entropy": np.mean([s["entropy"] for s in scored]) if scored else None,
            "missing_scores": count("missing"),
            "invalid_scores": count("invalid"),
            "bad_labels": count("bad"),
            "infinite_loss_rows": count("inf"),
        }
    return out


def ece_mce(ok, bins):
    """Top-label ECE and MCE over `ok` rows with per-bin means (Guo et al. 2017)."""
    conf = np.array([s["conf"] for s in ok])
    correct = np.array([s["correct"] for s in ok])
    b = np.array([s["bin"] for s in ok])
    gaps = [
        (np.sum(b == m), abs(correct[b == m].mean() - conf[b == m].mean()))
        for m in range(bins)
        if np.any(b == m)
    ]
    return sum(c * g for c, g in gaps) / len(ok), max(g for _, g in gaps)


L2_COLUMNS = ("ece_l2", "ece_l2_debiased", "ece_l2_low", "ece_l2_high")


def l2_calibration(ok, bins):
    """The l2 calibration errors of `ok` rows, bin by bin from the row-level values.

    Plug-in: sqrt(sum_b n_b/n (mean correct_b - mean conf_b)^2). Debiased, Kumar, Liang and Ma
    (2019, "Verified uncertainty calibration", as their `unbiased_l2_ce`): each bin with at
    least 2 rows adds n_b/n ((mean conf_b - mean correct_b)^2 - a_b (1 - a_b) / (n_b - 1)), a_b
    its accuracy; sqrt of the sum clipped at 0. Interval: D -+ z SE on the squared scale, with
    the delta-method variance sum_b (n_b/n)^2 (4 G_b v_b + 2 v_b^2) + (sum_b n_b/n G_b^2 -
    (sum_b n_b/n G_b)^2) / n, v_b = a_b (1 - a_b) / (n_b - 1), G_b = max(squared gap - v_b, 0).
    """
    conf = np.array([s["conf"] for s in ok])
    correct = np.array([s["correct"] for s in ok])
    b = np.array([s["bin"] for s in ok])
    n = len(ok)
    plug = debiased = variance = g1 = g2 = 0.0
    for m in set(b):
        nb = np.sum(b == m)
        a, c = correct[b == m].mean(), conf[b == m].mean()
        plug += nb / n * (a - c) ** 2
        if nb < 2:
            continue
        v = a * (1 - a) / (nb - 1)
        debiased += nb / n * ((c - a) ** 2 - v)
        g = max((a - c) ** 2 - v, 0.0)
        variance += (nb / n) ** 2 * (4 * g * v + 2 * v * v)
        g1, g2 = g1 + nb / n * g, g2 + nb / n * g * g
    se = np.sqrt(variance + (g2 - g1 * g1) / n)
    low, high = (np.sqrt(max(debiased + s * Z * se, 0)) for s in (-1, 1))
    return dict(
        zip(
            L2_COLUMNS,
            (np.sqrt(plug), np.sqrt(max(debiased, 0)), *((low, high) if n > 1 else (None,) * 2)),
        )
    )


def assert_close(actual, expected, what, rel=1e-9):
    """NULL-aware comparison: None only matches None; numbers to `rel` relative."""
    if expected is None or actual is None:
        assert actual is None and expected is None, f"{what}: {actual!r} vs {expected!r}"
        return
    assert np.isclose(actual, expected, rtol=rel, atol=1e-12), f"{what}: {actual!r} vs {expected!r}"


def by_key(table, keys):
    """{(period, *keys): row dict} from an Arrow result."""
    return {(r["period"], *(r[c] for c in keys)): r for r in table.to_pylist()}


ROLLUP_COLUMNS = [
    "period",
    "model_version",
    "region",
    "rows",
    "labelled_rows",
    "label_coverage",
    "evaluated_rows",
    "cross_entropy",
    "cross_entropy_se",
    "cross_entropy_low",
    "cross_entropy_high",
    "perplexity",
    "accuracy",
    "accuracy_low",
    "accuracy_high",
    "brier",
    "brier_se",
    "brier_low",
    "brier_high",
    "brier_multiclass",
    "brier_multiclass_se",
    "ece",
    "ece_l2",
    "ece_l2_debiased",
    "ece_l2_low",
    "ece_l2_high",
    "mean_confidence",
    "mean_entropy",
    "missing_scores",
    "invalid_scores",
    "bad_labels",
    "infinite_loss_rows",
    "base_rate",
    "mean_positive_probability",
    "roc_auc",
    "roc_auc_bound",
    "average_precision",
    "average_precision_bound",
]


@pytest.fixture(scope="module")
def con():
    return dbmetrics.connect()


@pytest.fixture(scope="module")
def logs(tmp_path_factory):
    rows = random_logs(np.random.default_rng(7))
    return rows, str(write_parquet(rows, tmp_path_factory.mktemp("logs") / "logs.parquet"))


def check_rollup(table, expected, keys):
    got = by_key(table, keys)
    assert set(got) == set(expected)
    for key, want in expected.items():
        for column, value in want.items():
            assert_close(got[key][column], value, f"{key} {column}")
        assert_close(got[key]["label_coverage"], want["labelled_rows"] / want["rows"], key)
        check_intervals(got[key], want["evaluated_rows"], f"{key}")


def check_intervals(row, n, what):
    """accuracy_low/high against scipy.stats.binomtest(k, n).proportion_ci(method='wilson')
    (Wilson 1927); the cross-entropy and Brier intervals as mean -+ z SE, z = norm.ppf(0.975)."""
    if n == 0:
        assert row["accuracy_low"] is None and row["accuracy_high"] is None
        return
    k = round(row["accuracy"] * n)
    ci = binomtest(k, n).proportion_ci(confidence_level=0.95, method="wilson")
    assert_close(row["accuracy_low"], ci.low, f"{what} accuracy_low", rel=1e-12)
    assert_close(row["accuracy_high"], ci.high, f"{what} accuracy_high", rel=1e-12)
    for metric in ("cross_entropy", "brier"):
        se = row[f"{metric}_se"]
        low = None if se is None else row[metric] - Z * se
        high = None if se is None else row[metric] + Z * se
        assert_close(row[f"{metric}_low"], low, f"{what} {metric}_low", rel=1e-12)
        assert_close(row[f"{metric}_high"], high, f"{what} {metric}_high", rel=1e-12)


@pytest.mark.parametrize("grain", ["day", "week", "month"])
def test_rollup_matches_numpy(con, logs, grain):
    rows, path = logs
    table = run_query(con, "rollup", {"logs": path, "segment_cols": "region", "grain": grain})
    assert table.column_names == ROLLUP_COLUMNS
    check_rollup(
        table,
        expected_rollup(rows, ["model_version", "region"], grain),
        ["model_version", "region"],
    )


def test_rollup_counts_every_awkward_row_once(con, logs):
    rows, path = logs
    total = run_query(con, "rollup", {"logs": path, "grain": "month"}).to_pylist()
    sums = {
        c: sum(r[c] for r in total)
        for c in ("rows", "missing_scores", "invalid_scores", "bad_labels", "infinite_loss_rows")
    }
    assert sums == {
        "rows": 1500,
        "missing_scores": 12,
        "invalid_scores": 10,
        "bad_labels": 10,
        "infinite_loss_rows": 8,
    }


@pytest.mark.parametrize("bins", [15, 10])
def test_calibration_matches_numpy_and_sklearn(con, logs, bins):
    rows, path = logs
    table = run_query(con, "calibration", {"logs": path, "grain": "month", "bins": str(bins)})
    got = {(r["period"], r["model_version"], r["bin"]): r for r in table.to_pylist()}
    groups = expected_groups(rows, ["model_version"], "month", bins)
    assert {k[:2] for k in got} == set(groups)
    for key, items in groups.items():
        ok = [s for issue, s, _ in items if issue == "ok"]
        conf = np.array([s["conf"] for s in ok])
        correct = np.array([s["correct"] for s in ok])
        b = np.array([s["bin"] for s in ok])
        ece, mce = ece_mce(ok, bins)
        # sklearn calibration_curve with y_true = correctness and y_prob = top-label confidence
        # bins exactly like us (searchsorted side='left' on linspace edges) and drops empty bins.
        acc_sk, conf_sk = calibration_curve(correct, conf, n_bins=bins, strategy="uniform")
        mine = [got[(*key, m)] for m in sorted(set(b))]
        assert len(mine) == len(acc_sk)
        for row, m, a, c in zip(mine, sorted(set(b)), acc_sk, conf_sk):
            assert row["rows"] == np.sum(b == m)
            assert_close(row["accuracy"], a, f"{key} bin {m} accuracy")
            assert_close(row["mean_confidence"], c, f"{key} bin {m} confidence")
            assert_close(row["gap"], a - c, f"{key} bin {m} gap")
            ci = binomtest(int(np.sum(correct[b == m])), int(np.sum(b == m))).proportion_ci(
                confidence_level=0.95, method="wilson"
            )
            assert_close(row["accuracy_low"], ci.low, f"{key} bin {m} accuracy_low", rel=1e-12)
            assert_close(row["accuracy_high"], ci.high, f"{key} bin {m} accuracy_high", rel=1e-12)
            assert_close(row["bin_lower"], m / bins, "lower edge")
            assert_close(row["ece"], ece, f"{key} ece")
            assert_close(row["mce"], mce, f"{key} mce")
            assert row["evaluated_rows"] == len(ok)


def test_calibration_edges_are_right_closed(con, tmp_path):
    """Reference-checks I3: B = 10, confidences 0.5 (wrong) and 0.55 (right) -> ECE 0.475."""
    rows = {
        "ts": [dt.datetime(2026, 1, 5)] * 2,
        "model_version": ["v"] * 2,
        "region": ["a"] * 2,
        "logits": [[0.5, 0.5], [0.55, 0.45]],
        "label": [1, 0],
    }
    path = write_parquet(rows, tmp_path / "edge.parquet")
    table = run_query(
        con, "calibration", {"logs": str(path), "scores_kind": "probs", "bins": "10"}
    ).to_pylist()
    assert [r["bin"] for r in table] == [4, 5]
    assert_close(table[0]["ece"], 0.475, "ece")
    assert_close(table[0]["mce"], 0.5, "mce")


def test_late_labels_equal_inline_labels(con, logs, tmp_path):
    rows, path = logs
    n = len(rows["ts"])
    ids = np.random.default_rng(1).permutation(n)
    logs_only = pa.table(
        {
            "pred_id": ids,
            **{c: pq.read_table(path)[c] for c in ("ts", "model_version", "region", "logits")},
        }
    )
    pq.write_table(logs_only, tmp_path / "preds.parquet")
    known = [i for i in range(n) if rows["label"][i] is not None]
    order = np.random.default_rng(2).permutation(known)  # labels arrive in any order
    pq.write_table(
        pa.table({"pred_id": ids[order], "label": [rows["label"][i] for i in order]}),
        tmp_path / "labels.parquet",
    )
    inline = run_query(con, "rollup", {"logs": path, "segment_cols": "region"})
    late = run_query(
        con,
        "rollup",
        {
            "logs": str(tmp_path / "preds.parquet"),
            "labels": str(tmp_path / "labels.parquet"),
            "id_col": "pred_id",
            "segment_cols": "region",
        },
    )
    check_rollup(
        late,
        {
            k: {c: v for c, v in r.items() if c not in ROLLUP_COLUMNS[:3]}
            for k, r in by_key(inline, ["model_version", "region"]).items()
        },
        ["model_version", "region"],
    )


def test_conflicting_late_labels_are_bad_labels(con, tmp_path):
    rows = {
        "ts": [dt.datetime(2026, 1, 5)] * 2,
        "model_version": ["v"] * 2,
        "region": ["a"] * 2,
        "logits": [[1.0, 0.0]] * 2,
        "label": [None, None],
    }
    write_parquet(rows, tmp_path / "p.parquet")
    pq.write_table(pa.table({"id": [0, 0, 1], "label": [0, 1, 1]}), tmp_path / "l.parquet")
    pq.write_table(
        pa.table(
            {"id": [0, 1], "ts": rows["ts"], "model_version": ["v", "v"], "logits": rows["logits"]}
        ),
        tmp_path / "p.parquet",
    )
    out = run_query(
        con,
        "rollup",
        {
            "logs": str(tmp_path / "p.parquet"),
            "labels": str(tmp_path / "l.parquet"),
            "id_col": "id",
        },
    ).to_pylist()
    assert (out[0]["bad_labels"], out[0]["evaluated_rows"]) == (1, 1)


def test_schema_drift_across_files_still_reads(con, tmp_path):
    """A folder whose files differ: FLOAT[] then DOUBLE[] logits, and a column added later."""
    rng = np.random.default_rng(3)
    first, second = random_logs(rng, n=400), random_logs(rng, n=300)
    folder = tmp_path / "logs"
    folder.mkdir()
    write_parquet(first, folder / "part-1.parquet", logits_type=pa.float32())
    write_parquet({**second, "country": ["fr"] * 300}, folder / "part-2.parquet")
    table = run_query(con, "rollup", {"logs": str(folder), "grain": "month"})
    first32 = {
        **first,
        "logits": [
            None if z is None else list(np.float32(z).astype(float)) for z in first["logits"]
        ],
    }
    merged = {c: first32[c] + second[c] for c in first}
    check_rollup(table, expected_rollup(merged, ["model_version"], "month"), ["model_version"])


def test_hive_partitioned_folder(con, logs, tmp_path):
    rows, path = logs
    con.sql(
        f"COPY (SELECT * FROM read_parquet('{path}')) TO '{tmp_path / 'hive'}' "
        "(FORMAT parquet, PARTITION_BY (region))"
    )
    table = run_query(con, "rollup", {"logs": str(tmp_path / "hive"), "segment_cols": "region"})
    check_rollup(
        table, expected_rollup(rows, ["model_version", "region"]), ["model_version", "region"]
    )


def test_text_labels_map_through_classes(con, tmp_path):
    names = ["cat", "dog", "eel"]
    rows = random_logs(np.random.default_rng(4), n=300, k=3)
    text_rows = {
        **rows,
        "label": [None if y is None else names[y] if 0 <= y < 3 else "yak" for y in rows["label"]],
    }
    table = pa.table(
        {
            "ts": pa.array(rows["ts"], pa.timestamp("us")),
            "model_version": rows["model_version"],
            "region": rows["region"],
            "logits": pa.array(rows["logits"], pa.list_(pa.float64())),
            "label": text_rows["label"],
        }
    )
    pq.write_table(table, tmp_path / "text.parquet")
    got = run_query(
        con, "rollup", {"logs": str(tmp_path / "text.parquet"), "classes": " cat, dog,eel "}
    )
    check_rollup(got, expected_rollup(rows, ["model_version"]), ["model_version"])


@pytest.mark.parametrize("kind", ["binary_logit", "binary_prob", "probs"])
def test_other_score_kinds_match_numpy(con, tmp_path, kind):
    rng = np.random.default_rng(5)
    n = 400
    s = rng.normal(size=n) * 2
    p1 = 1 / (1 + np.exp(-s))
    labels = (rng.random(n) < p1).astype(int)
    column = {"binary_logit": list(s), "binary_prob": list(p1), "probs": [[1 - q, q] for q in p1]}[
        kind
    ]
    table = pa.table(
        {
            "ts": pa.array([dt.datetime(2026, 1, 5)] * n, pa.timestamp("us")),
            "model_version": ["v"] * n,
            "score": column,
            "label": labels,
        }
    )
    pq.write_table(table, tmp_path / "b.parquet")
    got = run_query(
        con,
        "rollup",
        {"logs": str(tmp_path / "b.parquet"), "scores_col": "score", "scores_kind": kind},
    )
    as_logits = {
        "ts": [dt.datetime(2026, 1, 5)] * n,
        "model_version": ["v"] * n,
        "logits": [[0.0, z] for z in s],
        "label": list(labels),
    }
    want = expected_rollup(as_logits, ["model_version"])
    for key, row in by_key(got, ["model_version"]).items():
        for column, value in want[key].items():
            # probabilities round-trip through 1 / (1 + e^-s): compare those at 1e-9 too
            if column == "brier":  # two classes: brier is the positive class's, half the sum
                assert_close(row["brier_multiclass"], value, f"{kind} brier_multiclass")
                value = value / 2
            if column == "brier_se":  # sklearn's row score (p1 - y)^2, its mean's SE
                value = np.std((p1 - labels) ** 2, ddof=1) / np.sqrt(n)
            assert_close(row[column], value, f"{kind} {column}")
        check_intervals(row, n, kind)


def test_segments_joins_business_table(con, logs, tmp_path):
    rows, path = logs
    (tmp_path / "biz.csv").write_text("region,tier,revenue\na,gold,120.5\nc,bronze,3\n")
    out = run_query(
        con,
        "segments",
        {"logs": path, "segment_cols": "region", "business": str(tmp_path / "biz.csv")},
    )
    assert out.column_names == ROLLUP_COLUMNS + ["tier", "revenue", "business_found"]
    rollup = run_query(con, "rollup", {"logs": path, "segment_cols": "region"})
    check_rollup(
        out,
        {
            k: {c: v for c, v in r.items() if c not in ROLLUP_COLUMNS[:3]}
            for k, r in by_key(rollup, ["model_version", "region"]).items()
        },
        ["model_version", "region"],
    )
    tiers = {r["region"]: (r["tier"], r["revenue"], r["business_found"]) for r in out.to_pylist()}
    assert tiers == {"a": ("gold", 120.5, True), "b": (None, None, False)}


def test_segments_joins_a_business_table_keyed_by_period_and_differently_named_segments(
    con, logs, tmp_path
):
    rows, path = logs
    rollup = run_query(con, "rollup", {"logs": path, "segment_cols": "region"})
    weeks = sorted(set(rollup["period"].to_pylist()))
    # weekly revenue per region, dated by the week's Sunday, keys named differently;
    # region b has no row in the second week, and one row falls in a week without logs
    lines = ["week_ending,region_code,revenue"]
    revenue = {}
    for i, monday in enumerate(weeks):
        for region in ("a", "b"):
            if (i, region) == (1, "b"):
                continue
            revenue[(monday, region)] = 100.0 * i + (region == "b")
            lines.append(f"{monday + dt.timedelta(days=6)},{region},{revenue[(monday, region)]}")
    lines.append(f"{weeks[-1] + dt.timedelta(days=13)},a,999")
    (tmp_path / "weekly.csv").write_text("\n".join(lines) + "\n")
    out = run_query(
        con,
        "segments",
        {
            "logs": path,
            "segment_cols": "region",
            "business": str(tmp_path / "weekly.csv"),
            "business_segment_cols": "region_code",
            "business_period_col": "week_ending",
        },
    )
    assert out.column_names == ROLLUP_COLUMNS + ["revenue", "business_found"]
    assert out.num_rows == rollup.num_rows
    for r in out.to_pylist():
        want = revenue.get((r["period"], r["region"]))
        assert (r["revenue"], r["business_found"]) == (want, want is not None), r
    assert (
        sum(not r["business_found"] for r in out.to_pylist())
        == sum(1 for r in rollup.to_pylist() if (r["period"], r["region"]) not in revenue)
        > 0
    )
    (tmp_path / "twice.csv").write_text(
        f"week_ending,region_code,revenue\n{weeks[0]},a,1\n{weeks[0] + dt.timedelta(days=2)},a,2\n"
    )
    with pytest.raises(dbmetrics.DbmetricsError, match="more than one row"):
        run_query(
            con,
            "segments",
            {
                "logs": path,
                "segment_cols": "region",
                "business": str(tmp_path / "twice.csv"),
                "business_segment_cols": "region_code",
                "business_period_col": "week_ending",
            },
        )


def test_segments_refuses_duplicate_business_keys(con, logs, tmp_path):
    _, path = logs
    (tmp_path / "biz.csv").write_text("region,tier\na,gold\na,silver\n")
    with pytest.raises(dbmetrics.DbmetricsError, match="more than one row"):
        run_query(
            con,
            "segments",
            {"logs": path, "segment_cols": "region", "business": str(tmp_path / "biz.csv")},
        )


def simulated_cells(rng, cells, n, temperature, k=4):
    """`cells` versions of n rows each; labels drawn from softmax(z), scores z * temperature
    (temperature 1: perfectly calibrated; 2: over-confident, as the demo's v2)."""
    z = rng.normal(size=(cells * n, k)) * 1.5
    p = np.exp(z - logsumexp(z, axis=1, keepdims=True))
    labels = (rng.random(cells * n)[:, None] > p.cumsum(axis=1)).sum(axis=1)
    return z * temperature, labels, np.repeat([f"c{i:03d}" for i in range(cells)], n)


def binned_l2_truth(rng, temperature, bins=15, n=2_000_000):
    """The l2 calibration error over the 15 bins of the population, from a large sample."""
    z, y, _ = simulated_cells(rng, 1, n, temperature)
    p = np.exp(z - logsumexp(z, axis=1, keepdims=True))
    conf, correct = p.max(axis=1), p.argmax(axis=1) == y
    b = np.searchsorted(np.linspace(0, 1, bins + 1)[1:-1], conf, side="left")
    count = np.bincount(b, minlength=bins)
    gap = np.bincount(b, correct - conf, minlength=bins) / np.maximum(count, 1)
    return np.sqrt(np.sum(count / n * gap**2))


@pytest.mark.parametrize("temperature", [1.0, 2.0])
def test_the_debiased_calibration_error_removes_the_small_sample_bias(con, tmp_path, temperature):
    """200 cells of 300 rows: the plug-in ece_l2 is biased upward; Kumar, Liang and Ma's (2019)
    debiased estimate removes most of the bias (on a perfectly calibrated model, whose error is
    0, the square root of a clipped unbiased estimate keeps a little), and the approximate 95%
    interval covers the population's binned l2 calibration error in about 95% of the cells."""
    rng = np.random.default_rng(31)
    z, labels, cells = simulated_cells(rng, 200, 300, temperature)
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5)] * len(labels), pa.timestamp("us")),
                "model_version": cells,
                "logits": pa.array(list(z), pa.list_(pa.float64())),
                "label": labels,
            }
        ),
        tmp_path / "sim.parquet",
    )
    got = run_query(con, "rollup", {"logs": str(tmp_path / "sim.parquet")})
    plug, debiased, low, high = (np.array(got[c].to_pylist()) for c in L2_COLUMNS)
    truth = 0.0 if temperature == 1.0 else binned_l2_truth(np.random.default_rng(32), temperature)
    assert abs(debiased.mean() - truth) < (plug.mean() - truth) / 3
    covered = np.mean((low <= truth) & (truth <= high))
    assert 0.9 <= covered <= (1.0 if temperature == 1.0 else 0.99)
