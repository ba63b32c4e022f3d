"""drift: a prediction drift planted in one segment from a given week is flagged there only;
p-values against scipy.stats (norm, chi2) and q-values against
scipy.stats.false_discovery_control (Benjamini and Hochberg 1995)."""

import datetime as dt
import re

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from scipy.special import softmax
from scipy.stats import chi2, false_discovery_control, norm

import dbmetrics
from dbmetrics.errors import DbmetricsError
from dbmetrics.plots.flags import reason_names
from dbmetrics.queries import run_query

TESTS = ("cross_entropy", "prediction_js", "confidence_psi", "label_js", "ece")

START = dt.date(2026, 1, 5)  # a Monday
DRIFT_WEEK = 6


@pytest.fixture(scope="module")
def con():
    return dbmetrics.connect()


def write_logs(
    path, seed=31, per_cell=400, weeks=10, k=4, shift=2.0, drift_segment="b", versions=("v1", "v2")
):
    """Labels follow the undrifted model; from DRIFT_WEEK the drifted segment's model
    over-predicts class 0 (its logit + shift). Over 40 seeds the default rule flags every
    planted cell and few clean ones (test_false_discoveries_over_40_seeds)."""
    rng = np.random.default_rng(seed)
    segments = ("a", "b", "c")
    n = per_cell * weeks * len(segments) * len(versions)
    week = rng.integers(0, weeks, n)
    segment = rng.choice(segments, n)
    z = rng.normal(size=(n, k)) * 2.0
    y = (rng.random(n)[:, None] > np.cumsum(softmax(z, axis=1), axis=1)).sum(axis=1)
    z[(segment == drift_segment) & (week >= DRIFT_WEEK), 0] += shift
    days = week * 7 + rng.integers(0, 7, n)
    pq.write_table(
        pa.table(
            {
                "ts": np.datetime64(START) + days.astype("timedelta64[D]"),
                "model_version": rng.choice(versions, n),
                "region": segment,
                "logits": pa.array(list(z), pa.list_(pa.float64())),
                "label": y,
            }
        ),
        path,
    )
    return str(path)


def flagged_cells(table):
    return {(r["period"], r["region"]) for r in table.to_pylist() if r["flagged"]}


def planted(weeks=10):
    return {(START + dt.timedelta(weeks=w), "b") for w in range(DRIFT_WEEK, weeks)}


def test_planted_drift_is_flagged_there_and_nowhere_else(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet")
    out = run_query(con, "drift", {"logs": path, "segment_cols": "region"})  # all defaults
    rows = out.to_pylist()
    assert len(rows) == 10 * 3 * 2
    assert {(r["period"], r["region"], r["model_version"]) for r in rows if r["flagged"]} == {
        (p, s, v) for p, s in planted() for v in ("v1", "v2")
    }
    assert all(r["flag_reasons"] is None for r in rows if not r["flagged"])
    assert all("prediction_js" in r["flag_reasons"] for r in rows if r["flagged"])
    # the default reference is the first 4 weeks, never flagged, same version
    assert {r["period"] for r in rows if r["in_reference"]} == {
        START + dt.timedelta(weeks=w) for w in range(4)
    }
    assert {r["reference"] for r in rows} == {"same version"}


def test_drift_in_probabilities_with_explicit_window(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", seed=12)
    con.sql(
        f"CREATE OR REPLACE VIEW prob_logs AS SELECT * REPLACE (softmax(logits) AS logits) "
        f"FROM read_parquet('{path}')"
    )
    out = run_query(
        con,
        "drift",
        {
            "logs": "prob_logs",
            "scores_kind": "probs",
            "segment_cols": "region",
            "ref_start": "2026-01-12",
            "ref_end": "2026-02-01",
        },
    )
    assert flagged_cells(out) == planted()
    assert {r["period"] for r in out.to_pylist() if r["in_reference"]} == {
        dt.date(2026, 1, 12),
        dt.date(2026, 1, 19),
        dt.date(2026, 1, 26),
    }


def test_small_cells_are_never_flagged(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", per_cell=40, shift=4.0)
    out = run_query(con, "drift", {"logs": path, "segment_cols": "region"})
    assert flagged_cells(out) == set()
    # the same drift with the guard lowered: the planted cells come out
    assert planted() <= flagged_cells(
        run_query(con, "drift", {"logs": path, "segment_cols": "region", "min_rows": "20"})
    )


def test_new_version_is_compared_with_all_versions_pooled(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", seed=13, shift=0.0)
    con.sql(
        f"CREATE OR REPLACE VIEW rollout AS SELECT * REPLACE (CASE WHEN ts >= DATE "
        f"'2026-02-16' THEN 'v3' ELSE model_version END AS model_version) "
        f"FROM read_parquet('{path}')"
    )
    rows = run_query(con, "drift", {"logs": "rollout", "segment_cols": "region"}).to_pylist()
    assert {r["reference"] for r in rows if r["model_version"] == "v3"} == {"all versions"}
    assert not any(r["flagged"] for r in rows)


def test_no_segments_compares_whole_log(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet", seed=14, shift=3.0, drift_segment="nowhere")
    rows = run_query(con, "drift", {"logs": path, "version_col": "region"}).to_pylist()
    assert len(rows) == 30 and not any(r["flagged"] for r in rows)
    assert all(r["prediction_js"] < 0.01 and r["label_js"] < 0.01 for r in rows)


@pytest.mark.parametrize("k, bins", [(4, 15), (2, 15), (3, 6)])  # odd and even degrees, 1 too
def test_p_values_are_scipys_and_q_values_benjamini_hochbergs(con, tmp_path, k, bins):
    path = write_logs(tmp_path / "logs.parquet", seed=7, shift=0.7, k=k)
    params = {"logs": path, "segment_cols": "region", "bins": str(bins)}
    rows = run_query(con, "drift", params).to_pylist()
    tested = [r for r in rows if not r["in_reference"]]
    assert all(r[f"{t}_p"] is None for r in rows if r["in_reference"] for t in TESTS)
    for r in tested:
        n_eff = r["scored_rows"] * r["ref_scored_rows"] / (r["scored_rows"] + r["ref_scored_rows"])
        label_eff = (
            r["evaluated_rows"]
            * r["ref_evaluated_rows"]
            / (r["evaluated_rows"] + r["ref_evaluated_rows"])
        )  # every row has a label in [0, K): labelled = evaluated rows
        expected = {
            "cross_entropy_p": 2 * norm.sf(abs(r["cross_entropy_z"])),
            "prediction_js_p": chi2.sf(8 * n_eff * r["prediction_js"], k - 1),
            "confidence_psi_p": chi2.sf(n_eff * r["confidence_psi"], bins - 1),
            "label_js_p": chi2.sf(8 * label_eff * r["label_js"], k - 1),
        }
        for column, p in expected.items():
            assert r[column] == pytest.approx(p, rel=1e-9, abs=1e-300), column
    family = [(i, t) for i, r in enumerate(tested) for t in TESTS]
    q = false_discovery_control([tested[i][f"{t}_p"] for i, t in family], method="bh")
    assert [tested[i][f"{t}_q"] for i, t in family] == pytest.approx(q, rel=1e-9)
    # a test flags its cell exactly when q <= fdr and its effect passes its threshold
    for r in tested:
        expect = {
            "cross_entropy": r["cross_entropy_q"] <= 0.05,
            "prediction_js": r["prediction_js_q"] <= 0.05 and r["prediction_js"] > 0.01,
            "confidence_psi": r["confidence_psi_q"] <= 0.05 and r["confidence_psi"] > 0.25,
            "label_js": r["label_js_q"] <= 0.05 and r["label_js"] > 0.02,
            "ece": r["ece_q"] <= 0.05 and abs(r["ece_delta"]) > 0.1,
        }
        assert reason_names(r["flag_reasons"]) == {t for t, e in expect.items() if e}
    # not Bonferroni's p m: the rank counts
    assert any(
        tested[i][f"{t}_q"] < 0.999 * min(1, tested[i][f"{t}_p"] * len(family)) for i, t in family
    )


def test_reasons_show_each_q_value(con, tmp_path):
    path = write_logs(tmp_path / "logs.parquet")
    rows = run_query(con, "drift", {"logs": path, "segment_cols": "region"}).to_pylist()
    for r in (r for r in rows if r["flagged"]):
        for reason in r["flag_reasons"].split("; "):
            q = float(re.search(r"q = ([0-9.e+-]+)\)$", reason).group(1))
            assert q == pytest.approx(r[f"{reason.split()[0]}_q"], rel=0.05, abs=1e-300)


@pytest.mark.parametrize("fdr", ["0", "1", "-0.1", "1.5"])
def test_fdr_must_lie_strictly_between_0_and_1(con, tmp_path, fdr):
    path = write_logs(tmp_path / "logs.parquet", per_cell=20)
    with pytest.raises(DbmetricsError, match=r"parameter `fdr` must lie in \(0, 1\)"):
        run_query(con, "drift", {"logs": path, "fdr": fdr})


def found_and_false(con, tmp_path, seeds, query="drift", query_dirs=None, shift=2.0) -> dict:
    """Over the planted-drift logs of `seeds`: planted cells (period x region x version)
    flagged, clean tested cells flagged, and their totals; `reasons`: the clean cells'
    flag reasons."""
    counts = dict.fromkeys(("planted", "found", "clean", "false"), 0)
    counts["reasons"] = []
    for seed in seeds:
        path = write_logs(tmp_path / f"logs{seed}.parquet", seed=seed, shift=shift)
        params = {"logs": path, "segment_cols": "region"}
        rows = run_query(con, query, params, query_dirs=query_dirs).to_pylist()
        cells = {(p, s) for p, s in planted()}
        for r in rows:
            if r["in_reference"]:
                continue
            kind = (
                ("planted", "found") if (r["period"], r["region"]) in cells else ("clean", "false")
            )
            counts[kind[0]] += 1
            counts[kind[1]] += bool(r["flagged"])
            if kind[0] == "clean" and r["flagged"]:
                counts["reasons"].append(r["flag_reasons"])
    return counts


@pytest.mark.slow
def test_false_discoveries_over_40_seeds(con, tmp_path):
    """The numbers in bench/README.md: every planted cell found, at most 5% of the flagged
    cells clean."""
    c = found_and_false(con, tmp_path, range(40))
    assert c["planted"] == 40 * 8 and c["clean"] == 40 * 28
    print(f"\nplanted found {c['found']}/{c['planted']}, clean flagged {c['false']}/{c['clean']}")
    assert c["found"] == c["planted"]
    assert c["false"] <= 0.05 * (c["found"] + c["false"])
