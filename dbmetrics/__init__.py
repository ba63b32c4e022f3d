"""dbmetrics: numerically sound classifier metrics as DuckDB SQL functions.

Importing the package is light: DuckDB and the functions load on first use of ``connect``,
``register`` or ``FUNCTIONS`` (so the command line can honour Ctrl-C while they load).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from .errors import DbmetricsError, DbmetricsWarning

if TYPE_CHECKING:
    import duckdb

__version__ = "0.1.0"
__all__ = ["FUNCTIONS", "DbmetricsError", "DbmetricsWarning", "__version__", "connect", "register"]


def connect(
    database: str = ":memory:", functions: str = "fastest", **config
) -> duckdb.DuckDBPyConnection:
    """A DuckDB connection with every dbmetrics function registered.

    functions: 'fastest' (default; per function the faster of the SQL macro and the Python
    UDF, as measured by the benchmark), 'macros' or 'udf' (see `register`).
    `config` goes to DuckDB as settings, e.g. connect(memory_limit="2GB", threads=2).
    """
    import duckdb

    from .functions import register

    settings = {key: str(value) for key, value in config.items()}
    return register(duckdb.connect(database, config=settings), functions)


def __getattr__(name: str):
    """``FUNCTIONS`` and ``register``, imported from dbmetrics.functions on first use."""
    if name in ("FUNCTIONS", "register"):
        from . import functions

        return getattr(functions, name)
    raise AttributeError(f"module 'dbmetrics' has no attribute '{name}'")
