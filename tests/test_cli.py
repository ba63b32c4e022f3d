"""The dbmetrics command line: global behaviour, `sql`, output formats, errors and help."""

import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import click
import pyarrow.parquet as pq
import pytest

import dbmetrics
from dbmetrics.cli import output
from dbmetrics.cli.main import cli

FLAGS_SQL = "SELECT * FROM (VALUES (1, false), (2, {flag}), (3, NULL)) t(id, flagged)"


def test_sql_prints_an_aligned_table_with_the_functions_registered(invoke):
    result = invoke("sql", "SELECT 'a' AS name, cross_entropy([0.0, 0.0], 1) AS loss, NULL AS gap")
    assert result.exit_code == 0, result.output
    assert result.stdout.splitlines() == [
        "name    loss  gap",
        "----  ------  ----",
        "a     0.6931  NULL",
        "(1 row)",
    ]


def test_sql_reads_a_file_or_stdin(invoke, tmp_path):
    (tmp_path / "q.sql").write_text("SELECT 42 AS answer")
    from_file = invoke("sql", "--file", "q.sql", "--format", "csv")
    from_stdin = invoke("sql", "-", "--format", "csv", input="SELECT 42 AS answer")
    assert from_file.stdout == from_stdin.stdout == '"answer"\n42\n'


def test_sql_needs_exactly_one_source(invoke):
    assert invoke("sql").exit_code == 2
    assert invoke("sql", "SELECT 1", "--file", "q.sql").exit_code == 2


def test_sql_runs_every_statement_and_keeps_tables_in_a_database(invoke, tmp_path):
    db = str(tmp_path / "keep.duckdb")
    assert invoke("--database", db, "sql", "CREATE TABLE weekly AS SELECT 7 AS n").exit_code == 0
    result = invoke(
        "--database",
        db,
        "sql",
        "INSERT INTO weekly VALUES (8); SELECT sum(n) AS total FROM weekly",
        "-f",
        "csv",
    )
    assert result.stdout == '"total"\n15\n'


def test_database_comes_from_the_environment(invoke, tmp_path, monkeypatch):
    monkeypatch.setenv("DBMETRICS_DATABASE", str(tmp_path / "env.duckdb"))
    assert invoke("sql", "CREATE TABLE t AS SELECT 1 AS x").exit_code == 0
    assert (tmp_path / "env.duckdb").exists()


def test_memory_limit_and_threads_reach_duckdb(invoke):
    result = invoke(
        "--memory-limit",
        "500MB",
        "--threads",
        "1",
        "sql",
        "SELECT current_setting('threads') AS t, current_setting('memory_limit') AS m",
        "-f",
        "csv",
    )
    assert result.stdout == '"t","m"\n1,"476.8 MiB"\n'


@pytest.mark.parametrize(
    "suffix, fmt",
    [
        (".csv", "csv"),
        (".json", "json"),
        (".parquet", "parquet"),
        (".pq", "parquet"),
        (".txt", "table"),
    ],
)
def test_format_is_inferred_from_the_output_suffix(suffix, fmt):
    assert output.choose_format(None, f"out/result{suffix}") == fmt
    assert output.choose_format("csv", f"result{suffix}") == "csv"


def test_an_unknown_suffix_without_format_is_an_error(invoke):
    result = invoke("sql", "SELECT 1 AS x", "--output", "result.xlsx")
    assert result.exit_code == 1
    assert "cannot tell the format from 'result.xlsx'" in result.stderr


def test_every_format_writes_the_same_rows(invoke, tmp_path):
    query = "SELECT range AS i, range * 0.5 AS half, 'r' || range AS name FROM range(3)"
    for suffix in ("csv", "json", "parquet", "txt"):
        assert invoke("sql", query, "-o", f"out.{suffix}").exit_code == 0
    assert (
        tmp_path / "out.csv"
    ).read_text() == '"i","half","name"\n0,0.0,"r0"\n1,0.5,"r1"\n2,1.0,"r2"\n'
    assert json.loads((tmp_path / "out.json").read_text())[2] == {"i": 2, "half": 1.0, "name": "r2"}
    assert pq.read_table(tmp_path / "out.parquet").to_pylist()[1] == {
        "i": 1,
        "half": 0.5,
        "name": "r1",
    }
    assert (tmp_path / "out.txt").read_text().endswith("(3 rows)\n")


def test_json_writes_nan_and_inf_as_strings_apart_from_null_and_dates_iso(invoke):
    result = invoke(
        "sql",
        "SELECT 'nan'::DOUBLE AS a, '-inf'::DOUBLE AS b, [1.0, 'inf'::DOUBLE, NULL] AS c, "
        "DATE '2026-01-05' AS d, TIMESTAMP '2026-01-05 10:30:00' AS ts, "
        "12.50::DECIMAL(9,2) AS money, sum(range) AS big FROM range(4)",
        "-f",
        "json",
    )
    assert json.loads(result.stdout) == [
        {
            "a": "NaN",
            "b": "-Infinity",
            "c": [1.0, "Infinity", None],
            "d": "2026-01-05",
            "ts": "2026-01-05T10:30:00",
            "money": 12.5,
            "big": 6,
        }
    ]


def test_parquet_to_the_terminal_is_refused(invoke):
    result = invoke("sql", "SELECT 1 AS x", "-f", "parquet")
    assert result.exit_code == 1
    assert "needs --output" in result.stderr


def test_csv_refuses_list_columns_with_a_hint(invoke):
    result = invoke("sql", "SELECT [1, 2] AS xs", "-f", "csv")
    assert result.exit_code == 1
    assert "try --format json or parquet" in result.stderr


@pytest.mark.parametrize("flag, status", [("true", 3), ("false", 0)])
def test_fail_on_flag_exits_3_after_writing_when_a_row_is_flagged(invoke, tmp_path, flag, status):
    result = invoke("sql", FLAGS_SQL.format(flag=flag), "-o", "flags.csv", "--fail-on-flag")
    assert result.exit_code == status
    assert (tmp_path / "flags.csv").read_text().count("\n") == 4
    assert ("1 flagged row in column 'flagged'" in result.stderr) == (status == 3)


def test_fail_on_flag_takes_another_column(invoke):
    query = "SELECT true AS alert, false AS flagged"
    assert invoke("sql", query, "--fail-on-flag=alert").exit_code == 3
    assert invoke("sql", query, "--fail-on-flag").exit_code == 0


def test_fail_on_flag_names_the_columns_when_the_column_is_missing(invoke, tmp_path):
    result = invoke("sql", "SELECT 1 AS id, true AS alert", "-o", "x.csv", "--fail-on-flag")
    assert result.exit_code == 1
    assert (
        result.stderr
        == "Error: --fail-on-flag: the result has no column 'flagged'; columns are: id, alert\n"
    )
    assert not (tmp_path / "x.csv").exists()


def test_fail_on_flag_needs_a_boolean_column(invoke):
    result = invoke("sql", "SELECT 1 AS flagged", "--fail-on-flag")
    assert result.exit_code == 1
    assert "expected a BOOLEAN column" in result.stderr


def test_duckdb_errors_are_one_line_without_traceback(invoke):
    result = invoke("sql", "SELECT nope FROM range(3)")
    assert result.exit_code == 1
    assert (
        result.stderr
        == 'Error: Referenced column "nope" not found in FROM clause! Candidate bindings: "range"\n'
    )


def test_udf_errors_lose_the_python_wrapping(invoke):
    result = invoke("sql", "SELECT cross_entropy([1.0, 2.0], 5)")
    assert result.exit_code == 1
    assert result.stderr.startswith("Error: cross_entropy: ")
    assert result.stderr.count("\n") == 1


def test_missing_files_are_one_line(invoke):
    result = invoke("sql", "--file", "missing.sql")
    assert (result.exit_code, result.stderr) == (
        1,
        "Error: No such file or directory: 'missing.sql'\n",
    )


def test_verbose_shows_the_traceback(invoke):
    result = invoke("--verbose", "sql", "SELECT nope")
    assert result.exit_code == 1
    assert isinstance(result.exception, Exception) and "nope" in str(result.exception)


def test_quiet_and_verbose_exclude_each_other(invoke):
    assert invoke("-q", "-v", "sql", "SELECT 1").exit_code == 2


def test_output_is_atomic_when_the_write_fails(invoke, tmp_path, monkeypatch):
    target = tmp_path / "weekly.csv"
    target.write_bytes(b"previous good result\n")

    def broken(table, out):
        out.write(b"partial")
        raise OSError(28, "No space left on device")

    monkeypatch.setitem(output._WRITERS, "csv", broken)
    result = invoke("sql", "SELECT 1 AS x", "-o", str(target))
    assert (result.exit_code, result.stderr) == (1, "Error: No space left on device\n")
    assert target.read_bytes() == b"previous good result\n"
    assert os.listdir(tmp_path) == ["weekly.csv"]


def test_output_is_atomic_when_interrupted(invoke, tmp_path, monkeypatch):
    target = tmp_path / "weekly.csv"
    target.write_bytes(b"previous good result\n")

    def interrupted(table, out):
        out.write(b"partial")
        raise KeyboardInterrupt

    monkeypatch.setitem(output._WRITERS, "csv", interrupted)
    result = invoke("sql", "SELECT 1 AS x", "-o", str(target))
    assert result.exit_code == 130
    assert target.read_bytes() == b"previous good result\n"
    assert os.listdir(tmp_path) == ["weekly.csv"]


def test_a_finished_write_replaces_the_file_with_normal_permissions(invoke, tmp_path):
    target = tmp_path / "weekly.csv"
    target.write_bytes(b"old\n")
    assert invoke("sql", "SELECT 1 AS x", "-o", str(target)).exit_code == 0
    assert target.read_bytes() == b'"x"\n1\n'
    umask = os.umask(0)
    os.umask(umask)
    assert target.stat().st_mode & 0o777 == 0o666 & ~umask


def _commands(group=cli, prefix=("dbmetrics",)):
    yield prefix, group
    for name, command in getattr(group, "commands", {}).items():
        yield from _commands(command, prefix + (name,))


@pytest.mark.parametrize(
    "path, command", list(_commands()), ids=lambda v: " ".join(v) if isinstance(v, tuple) else ""
)
def test_every_command_has_help_with_a_runnable_example(path, command):
    with click.Context(command, info_name=" ".join(path)) as ctx:
        text = command.get_help(ctx)
    assert command.help and len(command.help.split("\n")[0]) > 10
    example = text.split("Example:\n", 1)[1].splitlines()[0].strip()
    assert example.startswith(" ".join(path[:2]))


def _subprocess(*args, cwd):
    """``python -m dbmetrics.cli ARGS`` in ``cwd``, importing this checkout."""
    root = str(Path(dbmetrics.__file__).parent.parent)
    env = {k: v for k, v in os.environ.items() if not k.startswith("DBMETRICS_")}
    env["PYTHONPATH"] = os.pathsep.join([root] + [p for p in [env.get("PYTHONPATH")] if p])
    return subprocess.run(
        [sys.executable, "-m", "dbmetrics.cli", *args],
        capture_output=True,
        text=True,
        cwd=cwd,
        env=env,
        timeout=120,
    )


def test_python_m_runs_the_cli_as_a_subprocess(tmp_path):
    done = _subprocess(
        "sql", FLAGS_SQL.format(flag="true"), "--format", "json", "--fail-on-flag", cwd=tmp_path
    )
    assert done.returncode == 3, done.stderr
    assert json.loads(done.stdout)[1] == {"id": 2, "flagged": True}
    assert done.stderr == "1 flagged row in column 'flagged'\n"


def test_a_subprocess_error_is_one_line_on_stderr(tmp_path):
    done = _subprocess("sql", "SELECT * FROM 'missing.parquet'", cwd=tmp_path)
    assert done.returncode == 1
    assert done.stdout == ""
    assert len(done.stderr.splitlines()) == 1 and "missing.parquet" in done.stderr


def test_ctrl_c_in_a_subprocess_exits_130_and_writes_nothing(tmp_path):
    root = str(Path(dbmetrics.__file__).parent.parent)
    env = {**os.environ, "PYTHONPATH": root}
    query = "SELECT sum(hash(i * j)) AS h FROM range(2000000000) a(i), range(3) b(j)"
    proc = subprocess.Popen(
        [sys.executable, "-m", "dbmetrics.cli", "--verbose", "sql", query, "-o", "out.csv"],
        cwd=tmp_path,
        env=env,
        stderr=subprocess.PIPE,
        text=True,
    )
    while not proc.stderr.readline().startswith("database:"):  # connected: the query starts now
        pass
    time.sleep(1)
    proc.send_signal(signal.SIGINT)
    _, stderr = proc.communicate(timeout=60)
    assert proc.returncode == 130
    assert stderr.strip() == "dbmetrics: interrupted"
    assert os.listdir(tmp_path) == []
