"""CPU time of building a partials store: Spark in local mode against the DuckDB update.

    python -m bench.spark_cpu [--data-dir bench/data] [--rows 10000000] [--cores 2]

Builds a store from the benchmark's 10M x 10 log (bench/datasets.py, invented data) once
with `partials update` and once with `dbmetrics.spark.update_store` on a local[cores]
session that is already running (its start-up is reported apart), checks that the two
stores hold equal states, and prints both CPU times (user + system, every process of the
job: for Spark the driver, the JVM and the Python workers) and their ratio as one JSON line.
"""

import argparse
import json
import os
import shutil
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(REPO))

from bench.datasets import SIZES, Dataset, ensure  # noqa: E402

TICKS = os.sysconf("SC_CLK_TCK")


def tree_cpu(root: int) -> float:
    """CPU seconds of `root` and every live descendant, plus their reaped children's."""
    children = {}
    stats = {}
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            text = (entry / "stat").read_text()
        except OSError:
            continue
        fields = text[text.rindex(")") + 2 :].split()
        pid, ppid = int(entry.name), int(fields[1])
        children.setdefault(ppid, []).append(pid)
        stats[pid] = sum(int(x) for x in fields[11:15])  # utime stime cutime cstime
    total, todo = 0, [root]
    while todo:
        pid = todo.pop()
        total += stats.get(pid, 0)
        todo.extend(children.get(pid, []))
    return total / TICKS


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--data-dir", type=Path, default=REPO / "bench" / "data")
    p.add_argument("--rows", type=int, default=10_000_000)
    p.add_argument("--cores", type=int, default=2)
    args = p.parse_args()
    full = next(d for d in SIZES["full"] if d.name == "k10")
    ds = full if args.rows == full.rows else Dataset("k10", args.rows, 10)
    logs = ensure(ds, args.data_dir, log=lambda m: print(m, file=sys.stderr))
    params = {"logs": str(logs), "segment_cols": "segment", "timezone": "UTC"}

    import dbmetrics
    from dbmetrics import partials
    from dbmetrics.queries.header import COLUMN_MAP
    from dbmetrics.spark import update_store

    out = Path(tempfile.mkdtemp(prefix="dbmetrics-spark-bench-"))
    try:
        con = dbmetrics.connect(threads=args.cores)
        con.execute("SET TimeZone = 'UTC'")
        given = {k: v for k, v in params.items() if k != "timezone" or k in COLUMN_MAP}
        cpu, wall = tree_cpu(os.getpid()), time.perf_counter()
        partials.update(con, given, out / "duckdb")
        duckdb_cpu, duckdb_wall = tree_cpu(os.getpid()) - cpu, time.perf_counter() - wall
        con.close()

        from pyspark.sql import SparkSession

        cpu, wall = tree_cpu(os.getpid()), time.perf_counter()
        spark = (
            SparkSession.builder.master(f"local[{args.cores}]")
            .config("spark.ui.enabled", "false")
            .config("spark.driver.memory", "4g")
            .getOrCreate()
        )
        spark.sparkContext.setLogLevel("ERROR")
        spark.range(1).collect()
        start_cpu, start_wall = tree_cpu(os.getpid()) - cpu, time.perf_counter() - wall
        cpu, wall = tree_cpu(os.getpid()), time.perf_counter()
        update_store(spark, params, out / "spark")
        spark_cpu, spark_wall = tree_cpu(os.getpid()) - cpu, time.perf_counter() - wall
        spark.stop()
        same = same_states(out / "duckdb", out / "spark")
    finally:
        shutil.rmtree(out, ignore_errors=True)
    print(
        json.dumps(
            {
                "log": ds.label,
                "cores": args.cores,
                "duckdb_cpu_s": round(duckdb_cpu, 1),
                "duckdb_wall_s": round(duckdb_wall, 1),
                "spark_session_start_cpu_s": round(start_cpu, 1),
                "spark_session_start_wall_s": round(start_wall, 1),
                "spark_cpu_s": round(spark_cpu, 1),
                "spark_wall_s": round(spark_wall, 1),
                "cpu_ratio_spark_to_duckdb": round(spark_cpu / duckdb_cpu, 2),
                "states_equal": same,
            }
        )
    )


def same_states(a: Path, b: Path) -> bool:
    """Both stores hold the same days and, per day and kind, rows equal to 1e-12."""
    import numpy as np
    import pyarrow.parquet as pq

    ma = json.loads((a / "manifest.json").read_text())["days"]
    mb = json.loads((b / "manifest.json").read_text())["days"]
    if sorted(ma) != sorted(mb):
        return False
    for day, entry in ma.items():
        for kind, name in entry["files"].items():
            x, y = pq.read_table(a / name), pq.read_table(b / mb[day]["files"][kind])
            keys = [(c, "ascending") for c in x.column_names if not c.startswith("sum_")]
            x, y = x.sort_by(keys), y.sort_by(keys)
            if x.schema != y.schema or x.num_rows != y.num_rows:
                return False
            for c in x.column_names:
                u, v = x.column(c).to_pylist(), y.column(c).to_pylist()
                if c.startswith("sum_"):
                    if not np.allclose(u, v, rtol=1e-12, atol=0):
                        return False
                elif u != v:
                    return False
    return True


if __name__ == "__main__":
    main()
