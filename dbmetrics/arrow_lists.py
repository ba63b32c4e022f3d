"""Arrow list columns <-> padded float64 matrices, and numpy results -> Arrow.

DuckDB hands a vectorized UDF one ChunkedArray per argument (<= 2048 rows). A
score column arrives as LIST, LARGE_LIST or FIXED_SIZE_LIST of FLOAT/DOUBLE.

`score_matrix` returns an (n, K) float64 matrix: zero-copy reshape when every row
has the same K (the common case), otherwise rows are padded to the longest with a
neutral value (-inf for logits: a masked class; 0 for probabilities). NULL and
empty rows are all-NaN and flagged as not present; a NULL element makes a NaN.
"""

from dataclasses import dataclass

import numpy as np
import pyarrow as pa


@dataclass
class ScoreMatrix:
    values: np.ndarray  # (n, K) float64 (or the stored float type, see score_matrix)
    present: np.ndarray  # (n,) bool: not NULL, not empty
    lengths: np.ndarray  # (n,) int64: classes in the row (0 when not present)


def single_array(arr) -> pa.Array:
    """The one Array behind a ChunkedArray (DuckDB sends one chunk per call)."""
    if isinstance(arr, pa.ChunkedArray):
        return arr.chunk(0) if arr.num_chunks == 1 else arr.combine_chunks()
    return arr


def non_null_mask(arr: pa.Array) -> np.ndarray:
    if arr.null_count == 0:
        return np.ones(len(arr), bool)
    return ~arr.is_null().to_numpy(zero_copy_only=False)


def float_values(child: pa.Array, dtype=np.float64) -> np.ndarray:
    """Child values as `dtype` (None: as stored, FLOAT or DOUBLE); NULL elements become NaN."""
    values = child.to_numpy(zero_copy_only=False)
    if values.dtype.kind != "f":
        values = values.astype(np.float64)
    return values if dtype is None else values.astype(dtype, copy=False)


def offsets_and_child(arr: pa.Array):
    """(offsets (n+1,), child values) for any list type."""
    if pa.types.is_fixed_size_list(arr.type):
        k = arr.type.list_size
        child = arr.values.slice(arr.offset * k, len(arr) * k)
        return np.arange(len(arr) + 1, dtype=np.int64) * k, child
    return arr.offsets.to_numpy().astype(np.int64, copy=False), arr.values


def score_matrix(arr, pad: float, dtype=np.float64) -> ScoreMatrix:
    """Padded matrix view of a list column, float64 (or, with dtype=None, the stored float
    type when every row has the same K: a caller that converts anyway saves a copy)."""
    arr = single_array(arr)
    if not (
        pa.types.is_list(arr.type)
        or pa.types.is_large_list(arr.type)
        or pa.types.is_fixed_size_list(arr.type)
    ):
        raise TypeError(f"expected a list of numbers, got {arr.type}")
    n = len(arr)
    offsets, child = offsets_and_child(arr)
    child = child.slice(offsets[0], offsets[-1] - offsets[0])  # only this slice's values
    offsets = offsets - offsets[0]
    lengths = np.diff(offsets)
    lengths[~non_null_mask(arr)] = 0
    present = lengths > 0
    k = int(lengths.max()) if n else 0
    values = float_values(child, dtype)
    if k == 0:
        return ScoreMatrix(np.full((n, 1), np.nan), present, lengths)
    if present.all() and np.all(lengths == k) and offsets[-1] == n * k:
        mat = values.reshape(n, k)
    elif np.all(lengths[present] == k):
        mat = np.full((n, k), np.nan)
        mat[present] = values[offsets[:-1][present, None] + np.arange(k)]
    else:
        mat = np.full((n, k), pad)
        rows = np.repeat(np.arange(n), lengths)
        cols = np.arange(len(rows)) - np.repeat(np.cumsum(lengths) - lengths, lengths)
        mat[rows, cols] = values[np.repeat(offsets[:-1], lengths) + cols]
        mat[~present] = np.nan
    return ScoreMatrix(mat, present, lengths)


def integer_column(arr):
    """(values int64 with NULL -> 0, present mask)."""
    arr = single_array(arr)
    present = non_null_mask(arr)
    if arr.null_count:
        arr = arr.fill_null(0)
    return arr.to_numpy(zero_copy_only=False).astype(np.int64, copy=False), present


def float_column(arr):
    """(values float64 with NULL -> NaN, present mask)."""
    arr = single_array(arr)
    return arr.to_numpy(zero_copy_only=False).astype(np.float64, copy=False), non_null_mask(arr)


def doubles(out: np.ndarray, null: np.ndarray | None = None) -> pa.Array:
    """DOUBLE column; NaN (and `null` rows) become NULL, +/-inf stay."""
    mask = np.isnan(out) if null is None else (np.isnan(out) | null)
    return pa.array(out, type=pa.float64(), mask=mask)


def integers(out: np.ndarray, null: np.ndarray, type_=None) -> pa.Array:
    return pa.array(out, type=type_ or pa.int32(), mask=null)


def booleans(out: np.ndarray, null: np.ndarray) -> pa.Array:
    return pa.array(out.astype(bool), type=pa.bool_(), mask=null)


def list_of_doubles(mat: np.ndarray, lengths: np.ndarray, null: np.ndarray) -> pa.Array:
    """LIST<DOUBLE> with each row cut back to its own length; `null` rows are NULL."""
    n, k = mat.shape
    keep = np.where(null, 0, lengths)
    if not null.any() and np.all(keep == k):
        return pa.FixedSizeListArray.from_arrays(pa.array(mat.ravel()), k)
    offsets = np.zeros(n + 1, np.int32)
    np.cumsum(keep, out=offsets[1:])
    values = mat[np.arange(k)[None, :] < keep[:, None]]
    return pa.ListArray.from_arrays(
        pa.array(offsets), pa.array(values, type=pa.float64()), mask=pa.array(null)
    )
