"""Shared pytest fixtures."""
import pytest

import dbmetrics


@pytest.fixture
def con():
    """An in-memory DuckDB connection with every dbmetrics function registered."""
    connection = dbmetrics.connect()
    yield connection
    connection.close()


@pytest.fixture(scope="module")
def module_con():
    """One such connection shared by a module's tests (hypothesis, many cheap queries)."""
    connection = dbmetrics.connect()
    yield connection
    connection.close()
