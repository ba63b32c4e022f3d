"""Exceptions as one line for stderr: DuckDB's error kind, SQL echo and caret dropped."""

from __future__ import annotations

import re

import duckdb

_KIND = re.compile(r"^(?:[A-Z][A-Za-z]*(?: [A-Z][A-Za-z]*)* Error: )+")
_UDF = "Python exception occurred while executing the UDF: "
_PYTHON_KIND = re.compile(r"^[A-Za-z_][\w.]*(?:Error|Exception): ")


def one_line(error: BaseException) -> str:
    """A one-line message for a DbmetricsError, duckdb.Error or OSError."""
    if isinstance(error, duckdb.Error):
        return _duckdb(str(error))
    if isinstance(error, OSError) and error.strerror:
        return f"{error.strerror}: '{error.filename}'" if error.filename else error.strerror
    return " ".join(str(error).split()) or type(error).__name__


def _duckdb(text: str) -> str:
    """``Binder Error: Referenced column "x" not found!\\nCandidate bindings: "y"\\n\\nLINE 1: ...``
    becomes ``Referenced column "x" not found! Candidate bindings: "y"``."""
    kept = []
    for line in text.splitlines():
        if line.startswith("LINE "):
            break
        if line.strip():
            kept.append(line.strip())
    message = _KIND.sub("", " ".join(kept))
    if _UDF in message:
        message = _PYTHON_KIND.sub("", message.split(_UDF, 1)[1])
    return message
