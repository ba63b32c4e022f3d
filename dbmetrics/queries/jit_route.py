"""STATE from the `predictions` rows through the compiled kernel (kernels/state_jit.py).

Per batch: the day, version and segment columns become one dense group number, the kernel
adds every row into its group x bin accumulators, and the non-empty ones become a small
Arrow table (the group's key values taken from its first row). DuckDB then adds the
batches' tables up per day x keys x bin, with fsum, exactly as it sums the engine's rows:
the result has STATE's columns and equals the numpy engine's up to rounding.
"""

import os
from collections import deque
from concurrent.futures import ThreadPoolExecutor

import duckdb
import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from dbmetrics.arrow_lists import float_values, integer_column, non_null_mask, offsets_and_child
from dbmetrics.kernels import state_jit

from .roles import KINDS, ColumnRoles

BATCH_ROWS = 1 << 17
_DIRECT_GROUPS = 1 << 16  # above this many key combinations, number the groups by sorting
_PARTS_VIEW = "dbmetrics_jit_parts"
_KERNEL_KIND = {"logit_row_stats": "logits", "prob_row_stats": "probabilities"}


def _group_numbers(columns: list) -> tuple:
    """(dense group number per row, number of groups) for the key columns' value
    combinations (NULL is a value)."""
    codes, sizes = [], []
    for col in columns:
        encoded = pc.dictionary_encode(col)
        codes.append(encoded.indices.fill_null(len(encoded.dictionary)).to_numpy())
        sizes.append(len(encoded.dictionary) + 1)
    if np.prod(sizes, dtype=np.float64) <= _DIRECT_GROUPS:
        group = np.zeros(len(columns[0]), np.int64)
        for code, size in zip(codes, sizes):
            group = group * size + code
        return group, int(np.prod(sizes))
    group = np.zeros(len(columns[0]), np.int64)
    for code, size in zip(codes, sizes):
        _, group = np.unique(group * size + code, return_inverse=True)
    return group.astype(np.int64), int(group.max()) + 1


def _batch_sums(batch: pa.RecordBatch, kind: str, key_names: list, bins: int):
    """The STATE rows of one batch as an Arrow table (None for an empty batch)."""
    if not len(batch):
        return None
    group, groups = _group_numbers([batch.column(name) for name in key_names])
    scores = batch.column("scores")
    offsets, child = offsets_and_child(scores)
    child = child.slice(offsets[0], offsets[-1] - offsets[0])  # this batch's values only
    offsets = offsets - offsets[0]
    y, y_present = integer_column(batch.column("label"))
    values = float_values(child, None)
    if values.dtype not in (np.float32, np.float64):  # half floats: numba computes in float32+
        values = values.astype(np.float64)
    counts, sums, first = state_jit.accumulate(
        kind,
        offsets,
        values,
        non_null_mask(scores),
        y,
        y_present,
        group,
        groups,
        bins,
    )
    slots = np.flatnonzero(counts[:, 0])
    rows = pa.array(first[slots // (bins + 1)])
    bin_of = slots % (bins + 1)
    table = {name: batch.column(name).take(rows) for name in key_names}
    table["bin"] = pa.array(bin_of.astype(np.int32), mask=bin_of == bins)
    table.update({name: counts[slots, i] for i, name in enumerate(state_jit.COUNTS)})
    table.update({name: sums[slots, i] for i, name in enumerate(state_jit.SUMS)})
    return pa.table(table)


def jit_state(
    con: duckdb.DuckDBPyConnection, roles: ColumnRoles, batches, schema: pa.Schema, bins: int
) -> pa.Table:
    """STATE of the `predictions` rows (day, version and segment columns, scores, label),
    given as an iterable of record batches with `schema`. `con` may be busy streaming them."""
    kind = _KERNEL_KIND[KINDS[roles.kind][0]]
    key_names = ["day", roles.version, *roles.segments]
    cursor = con.cursor()  # `con` is busy streaming `rows`
    try:
        threads = cursor.sql("SELECT current_setting('threads')").fetchall()[0][0]
        threads = max(1, min(threads, os.cpu_count() or 1))  # batches in flight: 2 x threads
        sums = _in_threads(lambda b: _batch_sums(b, kind, key_names, bins), batches, threads)
        parts = [t for t in sums if t is not None]
        cursor.register(
            _PARTS_VIEW, pa.concat_tables(parts) if parts else _no_rows(schema, key_names)
        )
        counts = ",\n    ".join(f"sum({c})::BIGINT AS {c}" for c in state_jit.COUNTS)
        sums = ",\n    ".join(f"fsum({c}) AS {c}" for c in state_jit.SUMS)
        return cursor.sql(
            f"SELECT day, {roles.keys}, bin,\n    {counts},\n    {sums}\n"
            f"FROM {_PARTS_VIEW}\nGROUP BY ALL"
        ).to_arrow_table()
    finally:
        cursor.close()


def _no_rows(schema: pa.Schema, key_names: list) -> pa.Table:
    """STATE's columns and no rows."""
    return pa.table(
        {
            **{name: pa.array([], schema.field(name).type) for name in key_names},
            "bin": pa.array([], pa.int32()),
            **{name: pa.array([], pa.int64()) for name in state_jit.COUNTS},
            **{name: pa.array([], pa.float64()) for name in state_jit.SUMS},
        }
    )


def _in_threads(work, batches, threads: int):
    """work(batch) for each batch, on `threads` threads (the kernel and Arrow's encoding
    release the interpreter lock), holding at most 2 x threads batches at a time."""
    with ThreadPoolExecutor(threads) as pool:
        pending, done = deque(), []
        for batch in batches:
            if len(pending) >= 2 * threads:
                done.append(pending.popleft().result())
            pending.append(pool.submit(work, batch))
        return done + [f.result() for f in pending]
