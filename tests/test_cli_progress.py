"""Progress on a terminal and Ctrl-C for long queries (dbmetrics.cli.progress)."""

import _thread
import io
import threading
import time

import duckdb
import pytest

from dbmetrics.cli import progress

LONG = "SELECT sum(hash(i * j)) AS h FROM range({n}) a(i), range(3) b(j)"


@pytest.fixture
def con():
    con = duckdb.connect()
    progress.enable(con)
    yield con
    con.close()


def test_progress_is_drawn_on_the_stream_and_erased_at_the_end(con, monkeypatch):
    monkeypatch.setattr(progress, "DELAY", 0.0)
    stream = io.StringIO()
    table = progress.run(con, lambda: con.sql(LONG.format(n=30_000_000)).to_arrow_table(), stream)
    assert table.num_rows == 1
    drawn = stream.getvalue()
    assert "%" in drawn and "[#" in drawn
    assert drawn.endswith("\r" + " " * 60 + "\r")


def test_no_stream_means_no_output_and_the_same_result(con):
    assert progress.run(con, lambda: con.sql("SELECT 42 AS x").fetchall(), None) == [(42,)]


def test_errors_of_the_call_reach_the_caller(con):
    with pytest.raises(duckdb.BinderException):
        progress.run(con, lambda: con.sql("SELECT nope").fetchall(), None)


def test_ctrl_c_interrupts_the_query_and_leaves_the_connection_usable(con):
    threading.Timer(0.3, _thread.interrupt_main).start()
    start = time.monotonic()
    with pytest.raises(KeyboardInterrupt):
        progress.run(con, lambda: con.sql(LONG.format(n=2_000_000_000)).fetchall(), None)
    assert time.monotonic() - start < 10
    assert con.sql("SELECT 1").fetchall() == [(1,)]


def test_bar_shape():
    assert progress._bar(50.0, width=10) == "[#####.....]  50.0%"
    assert progress._bar(120.0, width=4) == "[####] 120.0%"
