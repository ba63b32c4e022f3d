"""Time dbmetrics' rollup against the floor, hand-written SQL and in-memory routes.

    python -m bench [--sizes small|full] [--only NAME[,NAME]] [--data-dir bench/data]
                    [--repeat 3] [--repeat-big 1] [--memory-limit 1GB] [--default-malloc]

Each method runs in its own process (peaks do not mix; wait4 gives each one's max RSS),
after `warmup` untimed runs. See bench/README.md for what each method is.
"""

import argparse
import datetime as dt
import json
import os
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

REPO = Path(__file__).resolve().parent.parent
if str(REPO) not in sys.path:  # `python bench/run.py` as well as `python -m bench`
    sys.path.insert(0, str(REPO))

from bench import compare, machine  # noqa: E402
from bench.datasets import SIZES, Dataset, ensure  # noqa: E402
from bench.methods import METHODS  # noqa: E402

MALLOC_ENV = {"MALLOC_MMAP_THRESHOLD_": "33554432"}
RAM_SHARE = 0.70
GB = 2**30
CE_TARGET, BIG_RSS_TARGET = 2.5, 2 * GB


def parse_args(argv):
    p = argparse.ArgumentParser(prog="python -m bench", description=__doc__.splitlines()[0])
    p.add_argument("--sizes", choices=sorted(SIZES), default="small")
    p.add_argument(
        "--only",
        help="comma-separated method and/or dataset names "
        f"(methods: {', '.join(METHODS)}; datasets: k10, k1000, big); "
        "floor always runs with a dataset, for the ratios",
    )
    p.add_argument("--data-dir", type=Path, default=REPO / "bench" / "data")
    p.add_argument("--results-dir", type=Path, default=REPO / "bench" / "results")
    p.add_argument("--repeat", type=int, default=3, help="timed runs per method (after 1 warm-up)")
    p.add_argument(
        "--repeat-big",
        type=int,
        default=1,
        help="timed runs on the big log (no warm-up: the OS page cache is warm)",
    )
    p.add_argument("--memory-limit", default="1GB", help="DuckDB memory_limit for the big log")
    p.add_argument(
        "--default-malloc",
        action="store_true",
        help=f"do not set {' '.join(f'{k}={v}' for k, v in MALLOC_ENV.items())}",
    )
    return p.parse_args(argv)


def budget_bytes() -> int:
    """What a method may use: 70% of RAM, and never more than is available now minus 1 GiB."""
    mem = machine.meminfo()
    return int(min(RAM_SHARE * mem["MemTotal"], mem["MemAvailable"] - GB))


def estimate_bytes(method: str, ds: Dataset) -> int | None:
    """Peak RSS the in-memory routes would need (the DuckDB routes stream: None).

    Bytes per row fitted to peaks measured on this machine type (--sizes small: 1M and 10M
    x 10, 100k x 1000), times a 25% margin, plus 0.4 GiB for the interpreter and libraries:
    arrow_numpy ~ 56 + 11.4 K bytes a row (the Arrow table, its decode buffers, int64 keys),
    pandas_scipy ~ 315 + 20.2 K (Arrow table, object column, np.stack copy, frames).
    """
    per_row = {"arrow_numpy": (56, 11.4), "pandas_scipy": (315, 20.2)}.get(method)
    if per_row is None:
        return None
    fixed, per_class = per_row
    return int(1.25 * ds.rows * (fixed + per_class * ds.classes) + 0.4 * GB)


class Watchdog(threading.Thread):
    """Kill the child (by its pid) if its RSS passes the budget; remember the largest seen."""

    def __init__(self, pid: int, limit: int):
        super().__init__(daemon=True)
        self.pid, self.limit, self.killed, self.done = pid, limit, False, threading.Event()

    def rss(self) -> int:
        try:
            with open(f"/proc/{self.pid}/status") as f:
                for line in f:
                    if line.startswith("VmRSS:"):
                        return int(line.split()[1]) * 1024
        except OSError:
            pass
        return 0

    def run(self):
        while not self.done.wait(0.1):
            if self.rss() > self.limit:
                self.killed = True
                os.kill(self.pid, 9)
                return


def run_child(spec: dict, env: dict, limit: int) -> dict:
    """Run one method in a fresh process; returns the worker's output plus peak RSS."""
    with tempfile.TemporaryDirectory(prefix="dbmetrics-bench-") as tmp:
        spec_path, out_path, log_path = (Path(tmp) / n for n in ("spec.json", "out.json", "log"))
        spec_path.write_text(json.dumps(spec))
        with open(log_path, "w") as log:
            child = subprocess.Popen(
                [sys.executable, "-m", "bench.worker", str(spec_path), str(out_path)],
                cwd=REPO,
                env=env,
                stdout=log,
                stderr=log,
            )
        dog = Watchdog(child.pid, limit)
        dog.start()
        _, status, usage = os.wait4(child.pid, 0)
        child.returncode = os.waitstatus_to_exitcode(status)
        dog.done.set()
        peak = usage.ru_maxrss * 1024
        if dog.killed:
            return {
                "status": f"out of memory: stopped at {peak / GB:.1f} GiB "
                f"(budget {limit / GB:.1f} GiB)",
                "peak_rss": peak,
            }
        if child.returncode != 0:
            tail = log_path.read_text().strip().splitlines()[-3:]
            return {"status": "failed: " + " | ".join(tail), "peak_rss": peak}
        return {"status": "ok", "peak_rss": peak, **json.loads(out_path.read_text())}


BIG_SKIP = {  # methods not run on the big log, and why
    "rollup_udf_sql": "skipped on the big log (same work as rollup; see the smaller logs)",
}


def skip_reason(name: str, ds: Dataset, budget: int, sizes: str) -> str | None:
    if ds.big and name in BIG_SKIP:
        return BIG_SKIP[name]
    if ds.big and name == "pandas_scipy" and sizes == "small":
        return "skipped on the big log with --sizes small (about 40 s; the memory guard decides at full)"
    need = estimate_bytes(name, ds)
    if need is not None and need > budget:
        return (
            f"out of memory / skipped (would need ~{need / GB:.1f} GiB; "
            f"budget {budget / GB:.1f} GiB = min(70% of RAM, available - 1 GiB))"
        )
    return None


def selected(only: str | None, datasets, names):
    if not only:
        return list(datasets), list(names)
    wanted = {w.strip() for w in only.split(",") if w.strip()}
    unknown = wanted - {d.name for d in datasets} - set(names)
    if unknown:
        sys.exit(
            f"--only: unknown name(s) {', '.join(sorted(unknown))}; methods are "
            f"{', '.join(names)}; datasets are {', '.join(d.name for d in datasets)}"
        )
    ds = [d for d in datasets if d.name in wanted] or list(datasets)
    ms = [m for m in names if m in wanted] or list(names)
    return ds, (["floor"] if "floor" not in ms else []) + ms


def bench_dataset(ds: Dataset, methods, args, env) -> dict:
    path = ensure(ds, args.data_dir)
    size = sum(f.stat().st_size for f in ([path] if path.is_file() else path.glob("*.parquet")))
    print(
        f"\n== {ds.name}: {ds.label}, {size / 2**20:.0f} MiB on disk"
        + (f", DuckDB memory_limit={args.memory_limit}" if ds.big else "")
        + " ==",
        flush=True,
    )
    temp_dir = args.data_dir / "duckdb_tmp"
    out = {"dataset": ds.label, "bytes_on_disk": size, "methods": {}}
    for name in methods:
        budget = budget_bytes()
        reason = skip_reason(name, ds, budget, args.sizes)
        if reason:
            out["methods"][name] = {"status": reason}
            print(f"  {name:15s} {reason}", flush=True)
            continue
        spec = {
            "method": name,
            "scan": ds.scan(args.data_dir),
            "classes": ds.classes,
            "memory_limit": args.memory_limit if ds.big else None,
            "temp_dir": str(temp_dir),
            "warmup": 0 if ds.big else 1,
            "repeat": args.repeat_big if ds.big else args.repeat,
        }
        load = os.getloadavg()[0]
        t0 = time.perf_counter()
        res = run_child(spec, env, budget)
        res["load_average_before"] = load
        res["wall"] = time.perf_counter() - t0
        res["estimate"] = estimate_bytes(name, ds)
        if res["status"] == "ok":
            res["min"], res["median"] = min(res["times"]), statistics.median(res["times"])
            print(
                f"  {name:15s} min {res['min']:7.3f} s  median {res['median']:7.3f} s  "
                f"peak {res['peak_rss'] / 2**20:6.0f} MiB",
                flush=True,
            )
        else:
            print(f"  {name:15s} {res['status']}", flush=True)
        out["methods"][name] = res
    return out


def check_agreement(runs: dict) -> list:
    """Mismatch lines; also stores per-method 'agrees' and 'max_rel_diff'."""
    ok = {n: r for n, r in runs.items() if r["status"] == "ok"}
    rollups = [n for n in ok if METHODS[n][1] == "rollup"]
    problems = []
    ref_name = "rollup" if "rollup" in rollups else (rollups[0] if rollups else None)
    for n in rollups:
        if n == ref_name:
            continue
        bad = compare.rollup_mismatches(ok[ref_name]["result"], ok[n]["result"])
        ok[n]["agrees"] = not bad
        ok[n]["max_rel_diff"] = compare.max_rel_diff(ok[ref_name]["result"], ok[n]["result"])
        problems += [f"{n} vs {ref_name}: {line}" for line in bad]
    ce_ref = compare.overall_cross_entropy(ok[ref_name]["result"]) if ref_name else None
    for n in (n for n in ok if METHODS[n][1] == "ce"):
        if ce_ref is None:
            continue
        ok[n]["agrees"] = compare.close(ok[n]["result"], ce_ref)
        if not ok[n]["agrees"]:
            problems.append(
                f"{n}: mean cross-entropy {ok[n]['result']!r} but the rollup "
                f"({ref_name}) gives {ce_ref!r}"
            )
    if ref_name:
        ok[ref_name]["agrees"] = "reference"
    return problems


def table(ds_name: str, runs: dict) -> str:
    floor = runs.get("floor", {}).get("min")
    lines = [
        f"{ds_name}",
        f"  {'method':15s} {'min s':>8s} {'median s':>9s} {'x floor':>8s} "
        f"{'peak RSS':>9s}  {'agrees':9s} what",
    ]
    for name, r in runs.items():
        what = METHODS[name][2]
        if r["status"] != "ok":
            lines.append(f"  {name:15s} {r['status']}")
            continue
        ratio = f"{r['min'] / floor:8.2f}" if floor else f"{'-':>8s}"
        agrees = {True: "yes", False: "NO !!!", "reference": "reference"}.get(r.get("agrees"), "-")
        lines.append(
            f"  {name:15s} {r['min']:8.3f} {r['median']:9.3f} {ratio} "
            f"{r['peak_rss'] / 2**20:6.0f} MiB  {agrees:9s} {what}"
        )
    return "\n".join(lines)


def verdicts(report: dict) -> list:
    lines = []
    for key, d in report["datasets"].items():
        runs = d["methods"]
        floor = runs.get("floor", {}).get("min")
        ce = runs.get("ce_udf", {})
        if floor and ce.get("status") == "ok":
            r = ce["min"] / floor
            lines.append(
                f"{key}: mean cross-entropy (UDF) {r:.2f}x the floor: "
                f"{'meets' if r <= CE_TARGET else 'MISSES'} the <= {CE_TARGET}x target"
            )
        big = runs.get("rollup", {})
        if report["datasets"][key].get("big") and big.get("status") == "ok":
            peak = big["peak_rss"]
            lines.append(
                f"{key}: rollup under memory_limit={report['settings']['memory_limit']} "
                f"peaked at {peak / GB:.2f} GiB RSS: "
                f"{'meets' if peak < BIG_RSS_TARGET else 'MISSES'} the < 2 GB target"
            )
    return lines


def main(argv=None) -> int:
    args = parse_args(argv)
    args.data_dir = args.data_dir.resolve()
    datasets, methods = selected(args.only, SIZES[args.sizes], METHODS)
    env = {
        **os.environ,
        "PYTHONPATH": os.pathsep.join(
            [str(REPO)] + [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]
        ),
    }
    if not args.default_malloc:
        env.update(MALLOC_ENV)
    info = machine.describe(REPO)
    print(
        f"dbmetrics benchmark, --sizes {args.sizes}, {args.repeat} timed runs after 1 warm-up "
        f"(big log: {args.repeat_big}, no warm-up); every method in its own process"
    )
    print("machine: " + machine.one_line(info))
    print(
        "malloc: "
        + (
            "glibc defaults (--default-malloc)"
            if args.default_malloc
            else "MALLOC_MMAP_THRESHOLD_=33554432 set for every method's process: at K=1000 "
            "each UDF call allocates ~8 MB and glibc's default threshold makes the "
            "first-timed method pay page faults (notes §2)"
        )
    )
    report = {
        "started": dt.datetime.now().isoformat(timespec="seconds"),
        "machine": info,
        "settings": {
            "sizes": args.sizes,
            "repeat": args.repeat,
            "repeat_big": args.repeat_big,
            "memory_limit": args.memory_limit,
            "malloc_env": {} if args.default_malloc else MALLOC_ENV,
            "duckdb_threads": 2,
            "rtol": compare.RTOL,
        },
        "datasets": {},
    }
    problems = []
    for ds in datasets:
        d = bench_dataset(ds, methods, args, env)
        d["big"] = ds.big
        problems += [f"{ds.name}: {p}" for p in check_agreement(d["methods"])]
        report["datasets"][ds.name] = d
    report["load_average_at_end"] = os.getloadavg()
    report["mismatches"] = problems

    print("\n" + "=" * 100)
    print(
        f"Results (min and median of the timed runs; x floor = min / floor's min; peak RSS of "
        f"the method's process)\nmachine: {machine.one_line(info)}\nload average at end: "
        f"{report['load_average_at_end'][0]:.2f}"
    )
    for key, d in report["datasets"].items():
        print("\n" + table(f"{key}: {d['dataset']}", d["methods"]))
    print(
        "\nAgreement: all rollup routes compute in float64 from the float32 logits; counts "
        f"must be equal, every float within rtol {compare.RTOL:g} of the template's rollup; "
        "the mean cross-entropy must equal the rollup's labelled-row-weighted mean."
    )
    for line in verdicts(report):
        print("  " + line)
    busiest = max(
        r.get("load_average_before", 0)
        for d in report["datasets"].values()
        for r in d["methods"].values()
    )
    if busiest > 0.5 * info["cores"]:
        print(
            f"  WARNING: the machine was busy (load average up to {busiest:.1f} on "
            f"{info['cores']} cores before a method started): other processes shared the CPU, "
            "so times and ratios are inflated and noisy; rerun on an idle machine."
        )
    if problems:
        print("\n" + "!" * 100 + "\n!!! MISMATCH: the routes do not agree:")
        for p in problems:
            print("!!!   " + p)
        print("!" * 100)
    elif any(
        r.get("agrees") in (True, False)
        for d in report["datasets"].values()
        for r in d["methods"].values()
    ):
        print("  all routes that ran agree.")
    else:
        print("  (fewer than two comparable routes ran: nothing compared)")
    for d in report["datasets"].values():  # keep scalar results, drop the rollup rows
        for r in d["methods"].values():
            if isinstance(r.get("result"), list):
                del r["result"]
    args.results_dir.mkdir(parents=True, exist_ok=True)
    out = args.results_dir / f"bench-{args.sizes}-{dt.datetime.now():%Y%m%d-%H%M%S}.json"
    out.write_text(json.dumps(report, indent=1, default=str))
    print(f"\nJSON: {out}")
    return 1 if problems else 0


if __name__ == "__main__":
    sys.exit(main())
