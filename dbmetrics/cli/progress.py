"""Run a DuckDB call in a worker thread: progress on stderr, Ctrl-C interrupts the query.

Progress is DuckDB's ``con.query_progress()`` (percent, -1 when idle), polled every
0.1 s after ``enable_progress_bar`` is set with printing off; it appears after 0.5 s.
"""

from __future__ import annotations

import threading
import time
from collections.abc import Callable
from typing import TextIO, TypeVar

import duckdb

T = TypeVar("T")
POLL = 0.1
DELAY = 0.5


def enable(con: duckdb.DuckDBPyConnection) -> None:
    """Let ``con.query_progress()`` report without DuckDB printing its own bar."""
    con.execute("SET enable_progress_bar = true")
    con.execute("SET enable_progress_bar_print = false")


def run(con: duckdb.DuckDBPyConnection, call: Callable[[], T], stream: TextIO | None) -> T:
    """``call()`` in a worker thread; progress to ``stream`` (None: quiet).

    On KeyboardInterrupt the query is interrupted and the interrupt re-raised.
    """
    box: dict = {}
    done = (
        threading.Event()
    )  # not Thread.join(): a Ctrl-C inside it can mark a running thread stopped

    def work():
        try:
            box["value"] = call()
        except BaseException as e:  # handed to the caller's thread
            box["error"] = e
        finally:
            done.set()

    start = time.monotonic()
    threading.Thread(target=work, name="dbmetrics-query", daemon=True).start()
    shown = False
    try:
        while not done.wait(POLL):
            if stream is not None and time.monotonic() - start >= DELAY:
                pct = con.query_progress()
                if pct >= 0:
                    stream.write(f"\r{_bar(pct)}")
                    stream.flush()
                    shown = True
    except KeyboardInterrupt:
        while not done.wait(POLL):  # a call may run several statements
            con.interrupt()
        raise
    finally:
        if shown:
            stream.write("\r" + " " * 60 + "\r")
            stream.flush()
    if "error" in box:
        raise box["error"]
    return box["value"]


def _bar(pct: float, width: int = 30) -> str:
    """``[#########.....]  31%`` for a percentage in [0, 100]."""
    filled = int(width * min(pct, 100.0) / 100.0)
    return f"[{'#' * filled}{'.' * (width - filled)}] {pct:5.1f}%"
