"""The additive STATE in one numpy pass over large batches, summed by DuckDB.

DuckDB calls a vectorized Python UDF once per 2048 rows, and at small K the fixed cost of
each call outweighs the arithmetic. Here the normalised `predictions` stream out of DuckDB
in batches of BATCH_ROWS, the row-statistics kernel behind `logit_row_stats` /
`prob_row_stats` runs once per batch, and DuckDB sums the rows into STATE with the very SQL
of `prelude.state`. Same kernel, same aggregation: the result equals the UDF route's.
"""

import duckdb
import pyarrow as pa

from dbmetrics.arrow_lists import integer_column, score_matrix
from dbmetrics.kernels import row_stats
from dbmetrics.udf_adapters import LOGITS_PAD, PROBS_PAD, ROW_STATS_TYPE, row_stats_struct

from .header import bound_values
from .prelude import KINDS, ColumnMap, predictions, state

BATCH_ROWS = 16384
ROWS_VIEW = "dbmetrics_row_stats"
STATE_VIEW = "dbmetrics_state"
KERNELS = {"logit_row_stats": (row_stats.logit_row_stats, LOGITS_PAD),
           "prob_row_stats": (row_stats.prob_row_stats, PROBS_PAD)}


def with_row_stats(batch: pa.RecordBatch, kernel, pad, bins: int) -> pa.RecordBatch:
    """The batch with `scores` replaced by the `stats` struct the UDF would return."""
    sm = score_matrix(batch.column("scores"), pad)
    y, y_present = integer_column(batch.column("label"))
    stats = row_stats_struct(kernel(sm.values, sm.present, sm.lengths, y, y_present, bins))
    keep = [i for i, name in enumerate(batch.schema.names) if name != "scores"]
    return pa.RecordBatch.from_arrays([batch.column(i) for i in keep] + [stats],
                                      names=[batch.schema.names[i] for i in keep] + ["stats"])


def compute_state(con: duckdb.DuckDBPyConnection, cmap: ColumnMap, values: dict,
                  window: bool = False) -> pa.Table:
    """STATE for the log (or the time window) as an Arrow table; memory stays one batch."""
    kernel, pad = KERNELS[KINDS[cmap.kind][0]]
    source_sql = predictions(cmap, window)
    reader = con.sql(source_sql, params=bound_values(source_sql, values)).to_arrow_reader(BATCH_ROWS)
    fields = [f for f in reader.schema if f.name != "scores"] + [pa.field("stats", ROW_STATS_TYPE)]
    rows = pa.RecordBatchReader.from_batches(
        pa.schema(fields), (with_row_stats(b, kernel, pad, int(values["bins"])) for b in reader))
    cursor = con.cursor()  # the streaming result above keeps `con` busy
    try:
        cursor.register(ROWS_VIEW, rows)
        state_sql = state(cmap, rows=ROWS_VIEW)
        return cursor.sql(state_sql, params=bound_values(state_sql, values)).to_arrow_table()
    except (duckdb.Error, pa.ArrowException):
        # An error inside the stream (a corrupt file, a bad cast) reaches us wrapped and
        # without its context; the UDF route over the same SQL reports it as DuckDB words it.
        pass
    finally:
        cursor.close()
        reader.close()
    udf_sql = state(cmap, window)
    return con.sql(udf_sql, params=bound_values(udf_sql, values)).to_arrow_table()


def materialized_state(con, cmap: ColumnMap, values: dict) -> str:
    """Compute STATE, register it on `con`, and return the SQL that reads it."""
    con.register(STATE_VIEW, compute_state(con, cmap, values))
    return f"SELECT * FROM {STATE_VIEW}"
