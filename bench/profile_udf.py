"""Where the time goes in the rollup: DuckDB vs the Python UDF, per 2048-row call.

    python -m bench.profile_udf [--sizes small|full] [--dataset k10|k1000] [--threads 1]

Runs in this one process (a profile, not a benchmark): the floor; a no-op Arrow UDF with
the same signature as cross_entropy (DuckDB's cost of calling Python: FLOAT[] -> DOUBLE[]
cast, Arrow conversion, one call per vector); cross_entropy and logit_row_stats with
their bodies timed inside the call, split into the adapter steps; and the template's
aggregation alone, over a table of precomputed row statistics (fsum vs sum).
"""

import argparse
import re
import sys
import threading
import time
from collections import defaultdict
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
if str(REPO) not in sys.path:
    sys.path.insert(0, str(REPO))

import numpy as np  # noqa: E402
import pyarrow as pa  # noqa: E402
from duckdb.sqltypes import BIGINT, DOUBLE  # noqa: E402

import dbmetrics  # noqa: E402
from bench.datasets import SIZES, ensure  # noqa: E402
from dbmetrics import udf_adapters as ua  # noqa: E402
from dbmetrics.arrow_lists import integer_column, score_matrix  # noqa: E402
from dbmetrics.functions import ROW_STATS, SCORES  # noqa: E402
from dbmetrics.kernels import row_stats  # noqa: E402
from dbmetrics.queries import render_query  # noqa: E402


class Clock:
    """Seconds per named step, summed over calls and threads (the GIL serialises bodies)."""

    def __init__(self):
        self.lock = threading.Lock()
        self.total = defaultdict(float)
        self.calls = 0

    def add(self, parts: dict):
        with self.lock:
            self.calls += 1
            for k, v in parts.items():
                self.total[k] += v


def timed_row_stats(clock: Clock):
    def udf(scores, labels, bins):
        t = [time.perf_counter()]

        def lap():
            t.append(time.perf_counter())

        sm = score_matrix(scores, ua.LOGITS_PAD)
        lap()
        y, y_present = integer_column(labels)
        lap()
        b, _ = integer_column(bins)
        count = int(b[0])
        lap()
        st = row_stats.logit_row_stats(sm.values, sm.present, sm.lengths, y, y_present, count)
        lap()
        out = ua.row_stats_struct(st)
        lap()
        clock.add(
            dict(
                zip(
                    ("arrow->float64 matrix", "labels", "bins", "kernel", "numpy->Arrow struct"),
                    np.diff(t),
                )
            )
        )
        return out

    return udf


def timed(clock: Clock, body):
    def udf(scores, labels):  # DuckDB reads the arity from the signature
        t0 = time.perf_counter()
        out = body(scores, labels)
        clock.add({"body": time.perf_counter() - t0})
        return out

    return udf


def noop(scores, labels):
    return pa.array(np.zeros(len(scores)))


def best(con, sql, params, repeat):
    con.execute(sql, params).fetchall()
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        con.execute(sql, params).fetchall()
        times.append(time.perf_counter() - t0)
    return min(times)


def main(argv=None):
    p = argparse.ArgumentParser(prog="python -m bench.profile_udf")
    p.add_argument("--sizes", choices=sorted(SIZES), default="small")
    p.add_argument("--dataset", choices=("k10", "k1000"), default="k10")
    p.add_argument("--threads", type=int, default=2)
    p.add_argument("--repeat", type=int, default=3)
    p.add_argument("--data-dir", type=Path, default=REPO / "bench" / "data")
    args = p.parse_args(argv)
    ds = next(d for d in SIZES[args.sizes] if d.name == args.dataset)
    ensure(ds, args.data_dir)
    scan = ds.scan(args.data_dir)
    con = dbmetrics.connect(threads=args.threads)
    calls = -(-ds.rows // 2048)
    print(
        f"{ds.label}, threads={args.threads}, {calls} UDF calls of <= 2048 rows; "
        f"min of {args.repeat} after a warm-up; ms per call = total / {calls}; 'body' rows "
        "are seconds inside the Python UDF summed over threads (the GIL serialises them)"
    )

    def row(name, seconds, note=""):
        print(f"  {name:44s} {seconds:7.3f} s  {1e3 * seconds / calls:6.3f} ms/call  {note}")

    floor = best(con, "SELECT sum(list_sum(logits)) FROM read_parquet(?)", [scan], args.repeat)
    row("floor sum(list_sum(logits))", floor)
    con.create_function(
        "noop_udf", noop, [SCORES, BIGINT], DOUBLE, type="arrow", null_handling="special"
    )
    row(
        "no-op Arrow UDF(DOUBLE[], BIGINT) -> DOUBLE",
        best(con, "SELECT avg(noop_udf(logits, label)) FROM read_parquet(?)", [scan], args.repeat),
        "DuckDB's cost of calling Python",
    )

    ce = next(f for f in dbmetrics.FUNCTIONS if f.name == "cross_entropy")
    clock = Clock()
    con.create_function(
        "ce_timed",
        timed(clock, ce.body),
        list(ce.params),
        ce.returns,
        type="arrow",
        null_handling="special",
    )
    wall = best(con, "SELECT avg(ce_timed(logits, label)) FROM read_parquet(?)", [scan], 1)
    row("avg(cross_entropy) wall", wall)
    row("  UDF body", clock.total["body"])

    clock = Clock()
    con.create_function(
        "rs_timed",
        timed_row_stats(clock),
        [SCORES, BIGINT, BIGINT],
        ROW_STATS,
        type="arrow",
        null_handling="special",
    )
    sql = (
        "SELECT count(*), sum(s.loss), sum(s.brier), sum(s.entropy), sum(s.bin) FROM "
        "(SELECT rs_timed(logits, label, 15) AS s FROM read_parquet(?))"
    )
    con.execute(sql, [scan]).fetchall()
    clock.total.clear()
    wall = best(con, sql, [scan], 1)
    row("logit_row_stats, fields summed: wall", wall)
    for k, v in clock.total.items():
        row(f"  body: {k}", v)
    row("  body total", sum(clock.total.values()))

    rollup_sql, bound = render_query(con, "rollup", {"logs": scan, "segment_cols": "segment"})
    row("rollup template (run_query's SQL)", best(con, rollup_sql, bound, args.repeat))

    # Aggregation alone: the template's per-row statistics stored in a table, then its SQL
    # with the innermost scan and the UDF call replaced by that table's columns.
    con.execute(
        "CREATE OR REPLACE TEMP TABLE pre AS SELECT CAST(ts AS DATE) AS day, model_version,"
        " segment, NULL::DOUBLE[] AS scores, CAST(label AS BIGINT) AS label,"
        " logit_row_stats(logits, label, 15) AS stored FROM read_parquet(?)",
        [scan],
    )
    agg, swaps = re.subn(
        r"SELECT CAST\(logs\..*?AS logs", "SELECT * FROM pre", rollup_sql, flags=re.S
    )
    agg = agg.replace("logit_row_stats(scores, label, $bins) AS stats", "stored AS stats")
    if swaps != 1 or "stored AS stats" not in agg:
        sys.exit("the rollup template changed shape; update bench/profile_udf.py")
    bound_agg = {k: v for k, v in bound.items() if k not in ("logs", "bins")}
    row("template aggregation over stored stats (fsum)", best(con, agg, bound_agg, args.repeat))
    row(
        "  same with sum instead of fsum",
        best(con, agg.replace("fsum(", "sum("), bound_agg, args.repeat),
    )


if __name__ == "__main__":
    main()
