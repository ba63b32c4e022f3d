"""Atomic file writers: each file appears complete under its name, or not at all."""

import csv
from contextlib import contextmanager
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq

from dbmetrics.atomic import atomic_path

ROW_GROUP_ROWS = 1 << 17


@contextmanager
def parquet_sink(path: Path, schema: pa.Schema):
    """Yield ``write(table)`` streaming into one zstd Parquet file at ``path``, atomically.

    Tables are buffered until ``ROW_GROUP_ROWS`` rows are pending, so small days share a row group.
    """
    pending = []

    def flush():
        if pending:
            writer.write_table(pa.concat_tables(pending), row_group_size=ROW_GROUP_ROWS)
            pending.clear()

    def write(table: pa.Table) -> None:
        pending.append(table)
        if sum(t.num_rows for t in pending) >= ROW_GROUP_ROWS:
            flush()

    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp, pq.ParquetWriter(tmp, schema, compression="zstd") as writer:
        yield write
        flush()


def write_csv(path: Path, rows) -> None:
    """Write ``rows`` (header first) as a CSV file, atomically."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp, open(tmp, "w", newline="") as f:
        csv.writer(f).writerows(rows)
