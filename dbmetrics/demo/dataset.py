"""Write the demo dataset: monthly hive-partitioned logs, one label file, a region table."""

from contextlib import suppress
from datetime import date, timedelta
from itertools import groupby
from pathlib import Path

import numpy as np

from . import scenario
from .files import parquet_sink, write_csv
from .simulate import LABELS_SCHEMA, LOGS_SCHEMA, simulate_day

DEFAULT_SEED = 7
DEFAULT_ROWS_PER_DAY = 250
DEFAULT_WEEKS = 26
DEFAULT_START = date(2026, 1, 5)


def generate(
    out_dir,
    seed: int = DEFAULT_SEED,
    rows_per_day: int = DEFAULT_ROWS_PER_DAY,
    weeks: int = DEFAULT_WEEKS,
    start: date = DEFAULT_START,
) -> dict:
    """Generate ``weeks`` weeks of ``rows_per_day`` predictions a day from ``start`` into ``out_dir``.

    Writes ``logs/month=YYYY-MM/part-0.parquet``, ``labels/labels.parquet`` and ``regions.csv``;
    labels are known as of ``start + 7 * weeks`` days. Day ``i`` draws from its own PCG64 stream
    (``SeedSequence(seed).spawn``), so output depends only on the arguments, and memory on one
    day's rows. Each file is written atomically; month files left by an earlier, longer run are
    removed. Returns ``{"logs": dir, "labels": file, "regions": file}``.
    """
    out = Path(out_dir)
    days = [start + timedelta(days=i) for i in range(7 * weeks)]
    as_of = start + timedelta(days=7 * weeks)
    streams = np.random.SeedSequence(seed).spawn(len(days))
    paths = {
        "logs": out / "logs",
        "labels": out / "labels" / "labels.parquet",
        "regions": out / "regions.csv",
    }
    written = set()
    with parquet_sink(paths["labels"], LABELS_SCHEMA) as write_labels:
        for month, month_days in groupby(enumerate(days), key=lambda item: f"{item[1]:%Y-%m}"):
            part = paths["logs"] / f"month={month}" / "part-0.parquet"
            with parquet_sink(part, LOGS_SCHEMA) as write_logs:
                for i, day in month_days:
                    rng = np.random.Generator(np.random.PCG64(streams[i]))
                    logs, labels = simulate_day(rng, i, day, rows_per_day, as_of)
                    write_logs(logs)
                    write_labels(labels)
            written.add(part)
    for stale in set(paths["logs"].glob("month=*/part-0.parquet")) - written:
        stale.unlink()
        with suppress(OSError):
            stale.parent.rmdir()
    write_csv(paths["regions"], scenario.REGION_TABLE)
    return paths
