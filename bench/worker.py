"""One method in its own process: `python -m bench.worker SPEC_JSON OUT_JSON`.

SPEC: method, scan, classes, memory_limit, temp_dir, warmup, repeat. Writes OUT: the
seconds of each timed run (after `warmup` untimed ones), the last run's result, and this
process's peak RSS (VmHWM) as a cross-check of the parent's wait4 figure.
"""

import json
import sys
import time
from pathlib import Path


def peak_rss_bytes() -> int:
    with open("/proc/self/status") as f:
        for line in f:
            if line.startswith("VmHWM:"):
                return int(line.split()[1]) * 1024
    return 0


def main(spec_path: str, out_path: str) -> None:
    from bench.methods import METHODS, Context

    spec = json.loads(Path(spec_path).read_text())
    ctx = Context(spec["scan"], spec["classes"], spec["memory_limit"], spec["temp_dir"])
    t0 = time.perf_counter()
    run = METHODS[spec["method"]][0](ctx)
    setup = time.perf_counter() - t0
    for _ in range(spec["warmup"]):
        run()
    times = []
    for _ in range(spec["repeat"]):
        t0 = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - t0)
    with open(out_path, "w") as f:
        json.dump(
            {"times": times, "setup": setup, "result": result, "self_peak_rss": peak_rss_bytes()}, f
        )


if __name__ == "__main__":
    main(*sys.argv[1:])
