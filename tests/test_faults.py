"""Faults: a CLI process killed (SIGKILL, nothing runs after it) while it writes leaves the
previous output intact. Outputs: the old file stays; the killed run's temp file
(`.NAME.XXXX.tmp` beside the output) may stay behind: the next run neither reads nor
removes it (its name is unique per run), so it is harmless litter. Partials store: the old
manifest and its files stay; the next update removes the killed run's stray day files.
"""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pyarrow.parquet as pq
import pytest

import dbmetrics

ROOT = str(Path(dbmetrics.__file__).resolve().parent.parent)
DEMO = Path(ROOT) / "demo_parquet"
BIG = "SELECT range AS i, range * 0.5 AS x, 'row ' || range AS s FROM range({n})"


def start(*args, cwd):
    env = {k: v for k, v in os.environ.items() if not k.startswith("DBMETRICS_")}
    env["PYTHONPATH"] = ROOT
    return subprocess.Popen(
        [sys.executable, "-m", "dbmetrics.cli", "-q", *args],
        cwd=cwd,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
    )


def kill_when(proc, seen, timeout=60.0):
    """SIGKILL `proc` as soon as `seen()` is true; False if it finished first."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if seen():
            proc.send_signal(signal.SIGKILL)
            proc.wait()
            return True
        if proc.poll() is not None:
            return False
        time.sleep(0.002)
    proc.kill()
    raise AssertionError("the watched file never appeared")


def temp_files(folder: Path, name: str) -> list:
    return sorted(p.name for p in folder.iterdir() if p.name.startswith(f".{name}."))


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_killed_while_writing_leaves_the_previous_output(tmp_path, fmt):
    out = tmp_path / f"result.{fmt}"
    done = start("sql", BIG.format(n=10), "-o", out.name, cwd=tmp_path)
    assert done.wait(120) == 0
    previous = out.read_bytes()
    proc = start("sql", BIG.format(n=6_000_000), "-o", out.name, cwd=tmp_path)
    assert kill_when(proc, lambda: temp_files(tmp_path, out.name)), "finished before the kill"
    assert proc.returncode == -signal.SIGKILL
    assert out.read_bytes() == previous
    stale = temp_files(tmp_path, out.name)
    assert len(stale) == 1 and stale[0].endswith(".tmp")  # litter, never read
    again = start("sql", BIG.format(n=20), "-o", out.name, cwd=tmp_path)
    assert again.wait(120) == 0
    if fmt == "parquet":
        assert pq.read_table(out).num_rows == 20
    else:
        assert len(out.read_text().splitlines()) == 21
    assert temp_files(tmp_path, out.name) == stale  # ignored, not cleaned


def test_killed_check_keeps_the_previous_report(tmp_path):
    out = tmp_path / "health.json"
    out.write_text('{"previous": true}\n')
    proc = start(
        "check",
        "--set",
        f"logs={DEMO / 'logs'}",
        "--set",
        "label_col=",
        "-o",
        out.name,
        cwd=tmp_path,
    )
    time.sleep(0.3)  # inside the scan: nothing of the report is written yet
    proc.send_signal(signal.SIGKILL)
    proc.wait()
    assert out.read_text() == '{"previous": true}\n'
    assert len(temp_files(tmp_path, out.name)) <= 1


def store_state(store: Path) -> tuple:
    manifest = json.loads((store / "manifest.json").read_text())
    listed = {
        entry["files"][kind]
        for entry in manifest["days"].values()
        for kind in ("state", "class_state")
    }
    return manifest, listed


def rollup_from(store: Path, cwd: Path) -> list:
    """The rollup of the store, rows of values (floats rounded: DuckDB's parallel sums vary
    in the last bits from run to run)."""
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "dbmetrics.cli",
            "run",
            "rollup",
            "--set",
            f"partials={store}",
            "-f",
            "json",
        ],
        cwd=cwd,
        capture_output=True,
        env={**os.environ, "PYTHONPATH": ROOT},
        timeout=120,
    )
    assert done.returncode == 0, done.stderr
    return [
        {k: round(v, 10) if isinstance(v, float) else v for k, v in row.items()}
        for row in json.loads(done.stdout)
    ]


@pytest.mark.slow
def test_killed_partials_update_leaves_the_previous_store(tmp_path):
    store = tmp_path / "store"
    update = [
        "partials",
        "update",
        "--store",
        str(store),
        "--set",
        f"logs={DEMO / 'logs'}",
        "--set",
        f"labels={DEMO / 'labels' / 'labels.parquet'}",
        "--set",
        "id_col=prediction_id",
    ]
    assert start(*update, cwd=tmp_path).wait(120) == 0
    manifest, listed = store_state(store)
    before = rollup_from(store, tmp_path)

    proc = start(*update, "--full", cwd=tmp_path)
    staged = lambda: any((store / ".staging").glob("*/state.*.tmp"))  # noqa: E731
    assert kill_when(proc, staged), "the update finished before the kill"
    assert store_state(store) == (manifest, listed)  # the manifest was not replaced
    assert all((store / f).exists() for f in listed)
    assert rollup_from(store, tmp_path) == before

    full = time.monotonic()
    assert start(*update, "--full", cwd=tmp_path).wait(120) == 0
    full = time.monotonic() - full
    for delay in (0.1 + 0.9 * full * i / 6 for i in range(7)):  # kills across an update
        proc = start(*update, "--full", cwd=tmp_path)
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(30)
        manifest, listed = store_state(store)
        assert all((store / f).exists() for f in listed)
        assert rollup_from(store, tmp_path) == before

    assert start(*update, cwd=tmp_path).wait(120) == 0
    manifest, listed = store_state(store)
    on_disk = {
        f"{kind}/{p.name}" for kind in ("state", "class_state") for p in (store / kind).iterdir()
    }
    assert on_disk == listed | set(manifest["retired"])  # the killed runs' files are gone;
    # the previous generation stays one update longer for queries that read its manifest
    assert not list((store / ".staging").iterdir()) and not (store / ".pending.json").exists()
    assert rollup_from(store, tmp_path) == before
