"""Seeded synthetic prediction logs (invented data), cached as Parquet under the data folder.

Columns, as real logs have them: ts TIMESTAMP (about 26 weeks, in time order),
model_version VARCHAR (2 values), segment VARCHAR (5 values), logits FLOAT[] (float32),
label INTEGER (about 10% NULL = unlabelled). Each row has a hidden true class; its logit
gets a bump whose size depends on the version (v2 is the better model) and shrinks slowly
over time (drift), so loss, accuracy and calibration differ between groups.

Files are written chunk by chunk with pyarrow's ParquetWriter (nothing is built whole in
memory); a log of several parts is a folder of part-NNN.parquet files. A finished
dataset is marked by a `.done` file holding its spec, so an interrupted write is redone.
"""

import json
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

START_US = 1748822400 * 10**6  # 2025-06-02 00:00 UTC, a Monday
SPAN_US = 26 * 7 * 86400 * 10**6  # 26 weeks
VERSIONS = np.array(["v1", "v2"])
SEGMENTS = np.array(["web", "ios", "android", "partner", "batch"])
CHUNK_VALUES = 1 << 24  # logits generated per chunk (64 MB of float32)
ROW_GROUP_BYTES = 64 << 20  # about 64 MB of logits per Parquet row group
SCHEMA = pa.schema(
    [
        ("ts", pa.timestamp("us")),
        ("model_version", pa.string()),
        ("segment", pa.string()),
        ("logits", pa.list_(pa.float32())),
        ("label", pa.int32()),
    ]
)


@dataclass(frozen=True)
class Dataset:
    name: str  # short id used in tables and file names
    rows: int
    classes: int
    parts: int = 1  # > 1: a folder of part files
    big: bool = False  # the memory-limited case: DuckDB routes run under memory_limit
    seed: int = 20251201

    @property
    def label(self) -> str:
        return f"{human(self.rows)} x {self.classes}" + (
            f" ({self.parts} files)" if self.parts > 1 else ""
        )

    def path(self, data_dir: Path) -> Path:
        stem = f"logs_{human(self.rows)}_k{self.classes}_s{self.seed}"
        return data_dir / (stem if self.parts > 1 else stem + ".parquet")

    def scan(self, data_dir: Path) -> str:
        """The path DuckDB's read_parquet takes (a glob for a folder of parts)."""
        p = self.path(data_dir)
        return str(p / "*.parquet") if self.parts > 1 else str(p)

    def arrow_bytes(self) -> int:
        """Rough in-memory Arrow size: logits, offsets, ts, label, two short strings."""
        return self.rows * (4 * self.classes + 4 + 8 + 4 + 2 * 7)


SIZES = {
    "small": (
        Dataset("k10", 1_000_000, 10),
        Dataset("k1000", 100_000, 1000),
        Dataset("big", 10_000_000, 10, parts=4, big=True),
    ),
    "full": (
        Dataset("k10", 10_000_000, 10),
        Dataset("k1000", 1_000_000, 1000),
        Dataset("big", 100_000_000, 10, parts=10, big=True),
    ),
}


def human(n: int) -> str:
    for unit, size in (("M", 10**6), ("k", 10**3)):
        if n >= size and n % size == 0:
            return f"{n // size}{unit}"
    return str(n)


def chunk(ds: Dataset, first: int, n: int) -> pa.RecordBatch:
    """Rows [first, first + n) of the dataset; depends only on (seed, K, first)."""
    rng = np.random.default_rng([ds.seed, ds.classes, first])
    k = ds.classes
    rows = np.arange(first, first + n, dtype=np.int64)
    step = SPAN_US // ds.rows
    ts = START_US + rows * step + rng.integers(0, step, n)
    version = rng.integers(0, 2, n)
    segment = rng.choice(5, n, p=[0.4, 0.25, 0.2, 0.1, 0.05])
    prior = 1.0 / np.sqrt(np.arange(1, k + 1))  # a few frequent classes, a long tail
    truth = rng.choice(k, n, p=prior / prior.sum())
    z = rng.standard_normal((n, k), dtype=np.float32)
    z *= np.float32(1.5)
    bump = rng.gamma(2.0, 1.0 + 0.4 * version - 0.3 * (rows / ds.rows)) + 0.5 * segment / 4
    z[np.arange(n), truth] += bump.astype(np.float32)
    label = pa.array(truth.astype(np.int32), mask=rng.random(n) < 0.10)
    logits = pa.ListArray.from_arrays(
        pa.array(np.arange(n + 1, dtype=np.int32) * k), pa.array(z.ravel())
    )
    return pa.record_batch(
        [
            pa.array(ts, pa.timestamp("us")),
            pa.array(VERSIONS[version]),
            pa.array(SEGMENTS[segment]),
            logits,
            label,
        ],
        schema=SCHEMA,
    )


def write_part(ds: Dataset, path: Path, first: int, n: int) -> None:
    rows_per_chunk = max(1024, CHUNK_VALUES // ds.classes)
    row_group = max(1024, min(1 << 20, ROW_GROUP_BYTES // (4 * ds.classes)))
    tmp = path.with_suffix(".tmp")
    with pq.ParquetWriter(tmp, SCHEMA) as writer:
        for start in range(first, first + n, rows_per_chunk):
            batch = chunk(ds, start, min(rows_per_chunk, first + n - start))
            writer.write_table(pa.Table.from_batches([batch]), row_group_size=row_group)
    tmp.rename(path)


def ensure(ds: Dataset, data_dir: Path, log=print) -> Path:
    """Write the dataset unless a finished copy with the same spec is cached."""
    path = ds.path(data_dir)
    done = path.parent / (path.name + ".done")
    spec = json.dumps(asdict(ds), sort_keys=True)
    if done.exists() and done.read_text() == spec:
        return path
    log(f"generating {ds.name}: {ds.label} -> {path} ...")
    data_dir.mkdir(parents=True, exist_ok=True)
    if ds.parts == 1:
        write_part(ds, path, 0, ds.rows)
    else:
        path.mkdir(parents=True, exist_ok=True)
        bounds = np.linspace(0, ds.rows, ds.parts + 1).astype(np.int64)
        for i, (a, b) in enumerate(zip(bounds[:-1], bounds[1:])):
            write_part(ds, path / f"part-{i:03d}.parquet", int(a), int(b - a))
    done.write_text(spec)
    return path
