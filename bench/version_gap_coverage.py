"""`python -m bench.version_gap_coverage`: how often version_gap's 95% interval covers the
true difference between two versions, in the paired and the unpaired form.

Model (invented, seeded): each prediction has true logits s ~ N(0, 1.5^2) per class (K = 5)
and a label drawn from softmax(s). Version v1 logs 0.7 s + e1, version v2 logs 0.8 s + e2,
e1, e2 ~ N(0, 1) per class: v2 is better by a small margin. The true differences of the mean
cross-entropy, accuracy and Brier score (v2 - v1) are estimated from `--truth-rows` fresh
predictions (numpy, scipy.special.log_softmax); their Monte Carlo error is a few percent of
one repetition's standard error.

Each repetition is one segment (`rep`) of one log of `--reps` x `--rows` predictions per
version, so one query run answers every repetition. Shadow log: v1 and v2 score the same
predictions (same id; the paired form). Canary log: v2 scores other predictions, with other
ids (the unpaired, Welch form). A repetition covers when ci_low <= truth <= ci_high.
"""

import argparse
import datetime as dt
import sys
import tempfile
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
from scipy.special import log_softmax

import dbmetrics
from dbmetrics.queries import run_query

K = 5
METRICS = ("cross_entropy", "accuracy", "brier_multiclass")
DAY = dt.datetime(2026, 3, 2)


def draw(rng, n):
    """(true logits, labels) of n predictions."""
    s = rng.normal(0, 1.5, (n, K))
    p = np.exp(log_softmax(s, axis=1))
    y = (rng.random(n)[:, None] > np.cumsum(p, axis=1)).sum(axis=1)
    return s, np.minimum(y, K - 1)


def logged(rng, s, version):
    return (0.7 if version == "v1" else 0.8) * s + rng.normal(0, 1, s.shape)


def row_metrics(z, y):
    logp = log_softmax(z, axis=1)
    p = np.exp(logp)
    return {
        "cross_entropy": -logp[np.arange(len(y)), y],
        "accuracy": (p.argmax(axis=1) == y).astype(float),
        "brier_multiclass": ((p - np.eye(K)[y]) ** 2).sum(axis=1),
    }


def true_differences(rng, rows):
    """E[metric(v2) - metric(v1)] over the model, from `rows` fresh predictions."""
    s, y = draw(rng, rows)
    a, b = row_metrics(logged(rng, s, "v1"), y), row_metrics(logged(rng, s, "v2"), y)
    return {m: float((b[m] - a[m]).mean()) for m in METRICS}


def write_log(rng, path, reps, rows, shadow):
    n = reps * rows
    s, y = draw(rng, n)
    s2, y2 = (s, y) if shadow else draw(rng, n)
    ids = np.arange(n)
    parts = []
    for version, truth, labels, own_ids in (
        ("v1", s, y, ids),
        ("v2", s2, y2, ids if shadow else ids + n),
    ):
        z = logged(rng, truth, version)
        parts.append(
            pa.table(
                {
                    "ts": pa.array(np.full(n, np.datetime64(DAY, "us"))),
                    "model_version": pa.array([version] * n),
                    "rep": pa.array(ids // rows, pa.int64()),
                    "prediction_id": pa.array(own_ids, pa.int64()),
                    "logits": pa.FixedSizeListArray.from_arrays(pa.array(z.ravel()), K),
                    "label": pa.array(labels, pa.int64()),
                }
            )
        )
    pq.write_table(pa.concat_tables(parts), path)


def coverage(path, truth) -> dict:
    con = dbmetrics.connect()
    table = run_query(
        con,
        "version_gap",
        {"logs": str(path), "id_col": "prediction_id", "segment_cols": "rep", "grain": "month"},
    )
    out = {}
    for metric in METRICS:
        rows = [r for r in table.to_pylist() if r["metric"] == metric]
        covered = [r["ci_low"] <= truth[metric] <= r["ci_high"] for r in rows]
        out[metric] = {
            "form": sorted({r["form"] for r in rows}),
            "coverage": float(np.mean(covered)),
            "mean_difference": float(np.mean([r["difference"] for r in rows])),
            "mean_se": float(np.mean([r["difference_se"] for r in rows])),
            "reps": len(rows),
        }
    return out


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reps", type=int, default=200)
    parser.add_argument("--rows", type=int, default=2000, help="predictions per version and rep")
    parser.add_argument("--truth-rows", type=int, default=2_000_000)
    parser.add_argument("--seed", type=int, default=0)
    args = parser.parse_args(argv)
    rng = np.random.default_rng(args.seed)
    truth = true_differences(rng, args.truth_rows)
    print(f"true differences (v2 - v1): {', '.join(f'{m} {v:+.5f}' for m, v in truth.items())}")
    print("| form | metric | repetitions | coverage | mean difference | mean SE |")
    print("|---|---|---|---|---|---|")
    with tempfile.TemporaryDirectory() as folder:
        for name, shadow in (("paired", True), ("unpaired", False)):
            path = Path(folder) / f"{name}.parquet"
            write_log(rng, path, args.reps, args.rows, shadow)
            for metric, r in coverage(path, truth).items():
                assert r["form"] == [name], (name, r["form"])
                print(
                    f"| {name} | {metric} | {r['reps']} | {r['coverage']:.3f} | "
                    f"{r['mean_difference']:+.5f} | {r['mean_se']:.5f} |"
                )
    return 0


if __name__ == "__main__":
    sys.exit(main())
