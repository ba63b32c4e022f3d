"""Build a partials store on Apache Spark (install with the `spark` extra).

    update_store(spark, params, store, ...)   `partials update` on a Spark session
    state_frames(spark, params, since=None)   the partial states as Spark DataFrames
    python -m dbmetrics.spark update ...      the command line, for spark-submit

Each Spark task runs dbmetrics' own state computation on its rows; Spark selects the role
columns, drops days outside the window, joins late labels and adds up the tasks' partial
states; the store is published by the DuckDB update's own step. The numbers equal those of
`partials update` on the same log (state files to 1e-12 relative). pyspark is imported only
when a function runs, so this package imports without it.
"""


def update_store(*args, **kwargs):
    """See `dbmetrics.spark.job.update_store`."""
    from .job import update_store as run

    return run(*args, **kwargs)


def state_frames(*args, **kwargs):
    """See `dbmetrics.spark.job.state_frames`."""
    from .job import state_frames as run

    return run(*args, **kwargs)


__all__ = ["state_frames", "update_store"]
