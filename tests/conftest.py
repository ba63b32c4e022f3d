"""Shared pytest fixtures."""

from pathlib import Path

import duckdb
import numpy as np
import pyarrow as pa
import pytest

import dbmetrics

MACRO_PACK = Path(__file__).resolve().parents[1] / "sql" / "macros" / "dbmetrics_macros.sql"
# The conformance suite: every test_core_* test that takes `con` or `module_con` runs once per
# implementation of the functions.
CONFORMANCE = ("udf", "macros")


def pytest_generate_tests(metafunc):
    if "implementation" in metafunc.fixturenames and metafunc.module.__name__.rsplit(".")[
        -1
    ].startswith("test_core_"):
        metafunc.parametrize("implementation", CONFORMANCE, scope="module")


@pytest.fixture(scope="module")
def implementation():
    """Which functions a connection gets: dbmetrics.connect's default outside the
    conformance suite."""
    return "fastest"


def open_connection(implementation: str) -> duckdb.DuckDBPyConnection:
    """'udf' or 'fastest': dbmetrics.connect; 'macros': a bare DuckDB connection that only
    ran the SQL pack (no dbmetrics code behind any function)."""
    if implementation == "macros":
        connection = duckdb.connect()
        connection.execute(MACRO_PACK.read_text(encoding="utf-8"))
        return connection
    return dbmetrics.connect(functions=implementation)


@pytest.fixture
def con(implementation):
    """An in-memory DuckDB connection with every dbmetrics function registered."""
    connection = open_connection(implementation)
    yield connection
    connection.close()


@pytest.fixture(scope="module")
def module_con(implementation):
    """One such connection shared by a module's tests (hypothesis, many cheap queries)."""
    connection = open_connection(implementation)
    yield connection
    connection.close()


def assert_same_table(expected: pa.Table, got: pa.Table) -> None:
    """Equal column names, keys and values; floats to rel 1e-12 or abs 1e-12 (the same sums
    in another order; differences near 0 such as cross_entropy_z need the absolute bound)."""
    assert expected.column_names == got.column_names
    keys = [
        (c, "ascending")
        for c in expected.column_names
        if not pa.types.is_floating(expected.schema.field(c).type)
    ]
    a, b = expected.sort_by(keys), got.sort_by(keys)
    assert a.num_rows == b.num_rows
    for name in expected.column_names:
        x, y = a.column(name).to_pylist(), b.column(name).to_pylist()
        if pa.types.is_floating(expected.schema.field(name).type):
            xs = np.array([np.nan if v is None else v for v in x], float)
            ys = np.array([np.nan if v is None else v for v in y], float)
            np.testing.assert_allclose(ys, xs, rtol=1e-12, atol=1e-12, err_msg=name)
            assert (np.isnan(xs) == np.isnan(ys)).all(), name
        else:
            assert x == y, name


@pytest.fixture
def invoke(tmp_path, monkeypatch):
    """Run the CLI in an empty folder with no project file or environment settings:
    invoke("run", "rollup", ..., input=None) -> click's Result."""
    from click.testing import CliRunner

    from dbmetrics.cli.main import cli

    monkeypatch.chdir(tmp_path)
    for name in ("DBMETRICS_PROJECT", "DBMETRICS_DATABASE", "DBMETRICS_QUERY_PATH"):
        monkeypatch.delenv(name, raising=False)

    def run(*args, input=None):
        return CliRunner().invoke(cli, list(args), input=input)

    return run


@pytest.fixture
def same_table():
    """assert_same_table, for test modules (which cannot import each other)."""
    return assert_same_table
