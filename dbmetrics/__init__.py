"""dbmetrics: numerically sound classifier metrics as DuckDB SQL functions."""

import duckdb

from .errors import DbmetricsError, DbmetricsWarning
from .functions import FUNCTIONS, register

__version__ = "0.1.0"
__all__ = ["FUNCTIONS", "DbmetricsError", "DbmetricsWarning", "__version__", "connect", "register"]


def connect(database: str = ":memory:", **config) -> duckdb.DuckDBPyConnection:
    """A DuckDB connection with every dbmetrics function registered.

    `config` goes to DuckDB as settings, e.g. connect(memory_limit="2GB", threads=2).
    """
    settings = {key: str(value) for key, value in config.items()}
    return register(duckdb.connect(database, config=settings))
