"""Small promises of the command line: --version, quiet DDL, NULL shown as NULL, and Ctrl-C at
any moment ending with status 130 and one line."""

import datetime as dt
import os
import re
import subprocess
import sys
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics.cli.session import Session

ROOT = Path(dbmetrics.__file__).parent.parent


def test_version_is_the_package_version(invoke):
    result = invoke("--version")
    assert (result.exit_code, result.stdout) == (0, f"dbmetrics {dbmetrics.__version__}\n")
    pyproject = (ROOT / "pyproject.toml").read_text()
    assert re.search(r'^version = "(.*)"$', pyproject, re.M).group(1) == dbmetrics.__version__


@pytest.mark.parametrize(
    "statement",
    ["CREATE VIEW weekly AS SELECT 1 AS n", "SET threads = 1", "DROP TABLE IF EXISTS gone"],
)
def test_a_statement_without_rows_prints_nothing(invoke, statement):
    result = invoke("sql", statement)
    assert (result.exit_code, result.stdout, result.stderr) == (0, "", "")


def test_a_view_created_quietly_is_kept_and_empty_selects_still_print(invoke, tmp_path):
    db = str(tmp_path / "keep.duckdb")
    assert invoke("--database", db, "sql", "CREATE VIEW weekly AS SELECT 7 AS n").stdout == ""
    assert invoke("--database", db, "sql", "SELECT n FROM weekly", "-f", "csv").stdout == (
        '"n"\n7\n'
    )
    empty = invoke("sql", "SELECT 1 AS n WHERE false")
    assert empty.stdout.splitlines()[-1] == "(0 rows)"
    counted = invoke("sql", "CREATE TABLE t (x INT); INSERT INTO t VALUES (1), (2)", "-f", "csv")
    assert counted.stdout == '"Count"\n2\n'  # rows changed are an answer


def test_partials_show_prints_null_as_null(invoke, tmp_path):
    pq.write_table(
        pa.table(
            {
                "ts": pa.array([dt.datetime(2026, 1, 5)] * 2, pa.timestamp("us")),
                "model_version": ["v1", "v1"],
                "logits": [[0.0, 1.0]] * 2,
                "label": [1, 0],
            }
        ),
        tmp_path / "logs.parquet",
    )
    built = invoke("partials", "update", "--store", "s", "--set", "logs=logs.parquet")
    assert built.exit_code == 0, built.output
    shown = invoke("partials", "show", "--store", "s")
    assert shown.exit_code == 0, shown.output
    assert "NULL" in shown.stdout and "None" not in shown.stdout


def test_ctrl_c_while_cleaning_up_exits_130_with_one_line(invoke, monkeypatch):
    def interrupted_close(self):
        raise KeyboardInterrupt

    monkeypatch.setattr(Session, "close", interrupted_close)
    result = invoke("sql", "SELECT 1 AS x", "-f", "csv")
    assert result.exit_code == 130
    assert result.stderr.strip() == "dbmetrics: interrupted"


def test_ctrl_c_while_loading_duckdb_exits_130_without_a_traceback(tmp_path):
    """The signal arrives as `import duckdb` starts, as when a user presses Ctrl-C at once."""
    script = (
        "import builtins, os, signal, sys\n"
        "sys.argv = ['dbmetrics', 'sql', 'SELECT 1']\n"
        "real = builtins.__import__\n"
        "def hook(name, *args, **kwargs):\n"
        "    if name == 'duckdb':\n"
        "        os.kill(os.getpid(), signal.SIGINT)\n"
        "    return real(name, *args, **kwargs)\n"
        "builtins.__import__ = hook\n"
        "from dbmetrics.cli.__main__ import main\n"
        "main()\n"
    )
    env = {k: v for k, v in os.environ.items() if not k.startswith("DBMETRICS_")}
    env["PYTHONPATH"] = str(ROOT)
    done = subprocess.run(
        [sys.executable, "-c", script],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        env=env,
        timeout=120,
    )
    assert (done.returncode, done.stdout) == (130, "")
    assert done.stderr.strip() == "dbmetrics: interrupted"
