"""What the benchmark ran on: cores, CPU, memory, load, library versions, git commit."""

import os
import platform
import subprocess
from importlib import metadata

PACKAGES = ("duckdb", "pyarrow", "numpy", "scipy", "pandas")


def meminfo() -> dict:
    """/proc/meminfo in bytes (MemTotal, MemAvailable, ...)."""
    out = {}
    with open("/proc/meminfo") as f:
        for line in f:
            key, value = line.split(":", 1)
            out[key] = int(value.split()[0]) * 1024
    return out


def cpu_model() -> str:
    with open("/proc/cpuinfo") as f:
        for line in f:
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    return platform.processor() or "unknown"


def version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


def git_commit(repo) -> str:
    try:
        head = subprocess.run(
            ["git", "rev-parse", "--short", "HEAD"],
            cwd=repo,
            text=True,
            capture_output=True,
            check=True,
        ).stdout.strip()
        dirty = subprocess.run(
            ["git", "status", "--porcelain"], cwd=repo, text=True, capture_output=True
        ).stdout.strip()
        return head + ("+uncommitted changes" if dirty else "")
    except (OSError, subprocess.CalledProcessError):
        return "unknown"


def describe(repo) -> dict:
    mem = meminfo()
    return {
        "cores": len(os.sched_getaffinity(0)),
        "cpu": cpu_model(),
        "ram_gib": round(mem["MemTotal"] / 2**30, 1),
        "available_gib_at_start": round(mem["MemAvailable"] / 2**30, 1),
        "load_average_at_start": os.getloadavg(),
        "python": platform.python_version(),
        "platform": platform.platform(),
        "versions": {p: version(p) for p in PACKAGES},
        "dbmetrics_commit": git_commit(repo),
    }


def one_line(m: dict) -> str:
    v = ", ".join(f"{k} {x}" for k, x in m["versions"].items())
    return (
        f"{m['cores']} cores ({m['cpu']}), {m['ram_gib']} GiB RAM "
        f"({m['available_gib_at_start']} GiB available), load {m['load_average_at_start'][0]:.2f}; "
        f"Python {m['python']}; {v}; dbmetrics {m['dbmetrics_commit']}"
    )
