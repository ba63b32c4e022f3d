"""Running out of DuckDB's memory limit is reported as that, never as an unreadable file."""

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from click.testing import CliRunner

import dbmetrics
from dbmetrics import DbmetricsError
from dbmetrics.cli.main import cli
from dbmetrics.queries import run_query


@pytest.fixture
def log(tmp_path):
    """100k predictions over 14 days, one segment each: more than 4 MB of work."""
    n = 100_000
    rng = np.random.default_rng(0)
    days = (np.arange(n) % 14).astype("timedelta64[D]")
    scores = rng.normal(size=n * 3).astype("float32")
    path = tmp_path / "logs.parquet"
    pq.write_table(
        pa.table(
            {
                "ts": pa.array(np.datetime64("2026-01-05T00:00", "us") + days),
                "model_version": ["v1"] * n,
                "seg": [f"s{i}" for i in range(n)],
                "logits": pa.FixedSizeListArray.from_arrays(pa.array(scores), 3).cast(
                    pa.list_(pa.float32())
                ),
                "label": rng.integers(0, 3, n),
            }
        ),
        path,
    )
    return str(path)


def test_out_of_memory_names_the_limit_not_a_file(log):
    con = dbmetrics.connect(memory_limit="4MB")
    with pytest.raises(DbmetricsError) as raised:
        run_query(con, "rollup", {"logs": log, "segment_cols": "seg"})
    message = str(raised.value)
    assert message.startswith("query `rollup` failed: Out of Memory Error: ")
    assert "cannot read" not in message and "logs.parquet" not in message
    assert message.endswith("raise the memory limit (--memory-limit) or read fewer days")


def test_python_running_out_of_memory_is_one_line(tmp_path, monkeypatch):
    from dbmetrics.cli import sql

    def exhausted(con, query):
        raise MemoryError

    monkeypatch.chdir(tmp_path)
    monkeypatch.setattr(sql, "_fetch", exhausted)
    result = CliRunner().invoke(cli, ["sql", "SELECT 1"])
    assert result.exit_code == 1
    assert result.stderr.startswith("Error: out of memory in Python (the arrays and result tables")
    assert result.stderr.count("\n") == 1
